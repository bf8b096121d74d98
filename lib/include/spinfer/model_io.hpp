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
//   format_version  the integer 1. Files from a newer format version are refused with a message.
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
//   provenance      object; every key optional on loading (defaults in brackets):
//                     method (string, ""), l1, l2 (numbers, 0), iterations (integer, 0),
//                     converged (boolean, true), objective (number or null = unknown, 0),
//                     samples, units (integers, 0), seed (non-negative integer, 0),
//                     version (string, ""), extra (object, {}: method-specific details).
//                   Unknown provenance keys are refused (typo protection); put additions in extra.
//
// Numbers are written in the shortest form that reads back to the identical double (nlohmann's
// serializer), so a save/load round trip is exact. Files are UTF-8 and written atomically.
#pragma once

#include <string>

#include <nlohmann/json.hpp>

#include "spinfer/model.hpp"

namespace spinfer {

/// The model as a JSON value in the schema above. Throws InputError if the model is invalid.
nlohmann::json model_to_json(const IsingModel& model);

/// Reads and validates a JSON value in the schema above. `source` names the file (or object) in
/// error messages, which also name the key and, for arrays, the 1-based position. Throws
/// InputError for anything that does not follow the schema.
IsingModel model_from_json(const nlohmann::json& json, const std::string& source);

/// The provenance object alone (the "provenance" value of the schema), both ways; used by front
/// ends that carry provenance as a dictionary. Non-finite numbers are written as null.
nlohmann::json provenance_to_json(const Provenance& provenance);
Provenance provenance_from_json(const nlohmann::json& json, const std::string& source);

/// Writes the model to `path` (one coupling row per line), atomically. InputError for an invalid
/// model, FileError if the file cannot be written.
void save_model(const std::string& path, const IsingModel& model);

/// Reads a model file. FileError if it cannot be read; InputError if it is not valid JSON or does
/// not follow the schema (the message names the file and key).
IsingModel load_model(const std::string& path);

}  // namespace spinfer
