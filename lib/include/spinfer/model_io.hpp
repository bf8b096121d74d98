// The model file: a fitted IsingModel as JSON (our own schema, described here in full).
//
// Example (N = 2, spin convention):
//
//   {
//     "format": "spinfer-model",
//     "format_version": 1,
//     "convention": "spin",
//     "energy": "E = -sum_i h_i v_i - sum_{i<j} J_ij v_i v_j, v_i in {-1, +1}, P(v) = exp(-E(v)) / Z",
//     "names": ["cell_a", "cell_b"],
//     "fields": [0.12, -0.5],
//     "couplings": [
//       [0.0, 0.31],
//       [0.31, 0.0]
//     ],
//     "provenance": {"method": "tap", "l1": 0.0, "l2": 0.0, "iterations": 0, "converged": true,
//                    "objective": 0.0, "samples": 5000, "units": 2, "seed": 0,
//                    "version": "0.1.0", "extra": {}}
//   }
//
// Keys (all top-level keys are required; any other top-level key is an error):
//   format          the string "spinfer-model".
//   format_version  the integer 1, or 2 for a file whose couplings are in a separate .npy file
//                   (so that an older reader refuses it with an upgrade message rather than a
//                   schema error). Either form of `couplings` is read under either version;
//                   files from a newer format version are refused with a message.
//   convention      "binary" (v_i in {0, 1}) or "spin" (v_i in {-1, +1}): how `fields` and
//                   `couplings` are parameterised. The same distribution has different numbers in
//                   the two conventions (convert_model converts exactly).
//   energy          the energy function in words, exactly as above for the stated convention
//                   (binary: "... v_i in {0, 1} ..."). It is checked on loading (whitespace is
//                   ignored) so that a file written for another energy convention (for example
//                   with 1/2 sum_{i != j}, or P ∝ exp(+E)) is refused rather than misread.
//                   J_ij multiplies each unordered pair once; parameters are dimensionless
//                   (beta = 1 absorbed).
//   names           null, or a list of N unique non-empty strings (unit / column names).
//   fields          list of N finite numbers h_i.
//   couplings       N lists of N finite numbers J_ij: symmetric (to 1e-12 relative), zero
//                   diagonal. Row i is unit i.
//                   Or, for large models, a reference to a .npy file holding the same matrix:
//                     {"npy": "model.couplings.npy", "shape": [N, N], "dtype": "float64",
//                      "fnv1a64": "9c0d1e2f3a4b5c6d"}
//                   npy: the file's path relative to the folder of the JSON file (absolute
//                   paths are refused, so the pair can be moved together); shape and dtype: what
//                   the file must hold (float64, C or Fortran order; the writer uses Fortran
//                   order, Eigen's layout); fnv1a64: the 64-bit FNV-1a hash (checksum.hpp) of the
//                   file's bytes, 16 hex digits. A file whose hash, dtype or shape differs (a
//                   stale or mismatched pair) is refused naming both files; the matrix must
//                   then pass the same symmetry, diagonal and finiteness checks as inline lists.
//                   numpy.load(path) gives the couplings exactly.
//   provenance      object; every key optional on loading (defaults in brackets):
//                     method (string, ""), l1, l2 (numbers, 0), iterations (integer, 0),
//                     converged (boolean, true), objective (number or null = unknown, 0),
//                     samples, units (integers, 0), seed (non-negative integer, 0),
//                     version (string, ""), extra (object, {}: method-specific details).
//                   Unknown provenance keys are refused (typo protection); put additions in extra.
//
// Where the couplings go (CouplingsStorage): inline lists up to kInlineCouplingsMaxUnits = 500
// units, a sibling file above (N^2 numbers as JSON text cost ~20 bytes each to store and far
// more to parse; as .npy exactly 8), unless the caller forces one form. The sibling of
// "DIR/NAME.json" is "DIR/NAME.couplings.npy" (couplings_sibling_path). Both files are written
// atomically and together (write_files_atomically: the .npy first, then the JSON; a failure
// leaves neither new file). Writing a model inline does not remove an older sibling file.
//
// Numbers are written in the shortest form that reads back to the identical double (nlohmann's
// serializer), so a save/load round trip is exact (the .npy holds the doubles' bytes). Files are
// UTF-8 and written atomically.
#pragma once

#include <optional>
#include <string>

#include <nlohmann/json.hpp>

#include "spinfer/model.hpp"

namespace spinfer {

/// Where save_model puts the couplings (see the file comment).
enum class CouplingsStorage {
  automatic,  ///< inline up to kInlineCouplingsMaxUnits units, a sibling .npy file above
  inline_lists,
  npy_file,
};

/// The largest model whose couplings `automatic` writes inline.
constexpr Eigen::Index kInlineCouplingsMaxUnits = 500;

/// "auto", "inline" or "npy"; InputError naming `what` (e.g. "--couplings-file") otherwise.
CouplingsStorage parse_couplings_storage(const std::string& text, const std::string& what);

/// Whether a model of `units` units is written with a sibling couplings file.
bool couplings_in_sibling(Eigen::Index units, CouplingsStorage storage);

/// The sibling couplings file of a model file: "DIR/NAME.json" -> "DIR/NAME.couplings.npy"
/// (a path without the .json extension gets ".couplings.npy" appended).
std::string couplings_sibling_path(const std::string& model_path);

/// The model as a JSON value in the schema above, couplings inline. Throws InputError if the
/// model is invalid.
nlohmann::json model_to_json(const IsingModel& model);

/// Reads and validates a JSON value in the schema above. `source` names the file (or object) in
/// error messages, which also name the key and, for arrays, the 1-based position. Throws
/// InputError for anything that does not follow the schema. Couplings stored in a separate file
/// are read from `folder` (the JSON file's folder; "" is the working directory); without a
/// folder such a reference is an InputError. FileError if that file cannot be read.
IsingModel model_from_json(const nlohmann::json& json, const std::string& source,
                           const std::optional<std::string>& folder = std::nullopt);

/// The provenance object alone (the "provenance" value of the schema), both ways; used by front
/// ends that carry provenance as a dictionary. Non-finite numbers are written as null.
nlohmann::json provenance_to_json(const Provenance& provenance);
Provenance provenance_from_json(const nlohmann::json& json, const std::string& source);

/// Writes the model to `path` (one coupling row per line), or, as `storage` decides, the JSON to
/// `path` and the couplings to couplings_sibling_path(path); atomically, existing files replaced.
/// InputError for an invalid model, FileError if a file cannot be written.
void save_model(const std::string& path, const IsingModel& model,
                CouplingsStorage storage = CouplingsStorage::automatic);

/// Reads a model file (and its couplings file, if it has one). FileError if a file cannot be
/// read; InputError if it is not valid JSON, does not follow the schema, or the couplings file
/// does not match (the message names the file and key, and both files for a mismatch).
IsingModel load_model(const std::string& path);

}  // namespace spinfer
