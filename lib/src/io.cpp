// Reading and writing matrices by file extension.
#include "spinfer/io.hpp"

#include <algorithm>
#include <cctype>
#include <filesystem>

#include "spinfer/errors.hpp"

namespace spinfer {
namespace {

const char* kSupported = ".npy, .npz, .csv, .tsv or .txt";

SpinMatrix read_npz_matrix(const std::string& path, const ReadOptions& o) {
  const std::vector<std::string> members = npz_members(path);
  const auto has = [&](const char* name) {
    return std::find(members.begin(), members.end(), name) != members.end();
  };
  std::string member = o.member;
  bool with_names = false;
  if (member.empty()) {
    // Our own archives hold "X" and "names"; prefer "X" when it is there.
    with_names = has("X") && has("names");
    if (has("X")) member = "X";
    else if (members.size() == 1) member = members[0];
  }
  const NpyArray a = read_npz_member(path, member);  // lists the members if none was chosen
  SpinMatrix m = npy_to_matrix(a, o.convention, path + " (array '" + member + "')");
  if (with_names) {
    const std::string src = path + " (array 'names')";
    std::vector<std::string> names = npy_to_strings(read_npz_member(path, "names"), src);
    if (std::int64_t(names.size()) != m.cols())
      throw InputError(src + ": " + std::to_string(names.size()) + " names for " +
                       std::to_string(m.cols()) + " columns");
    m.set_names(std::move(names));
  }
  return m;
}

}  // namespace

std::string file_extension(const std::string& path) {
  std::string ext = std::filesystem::path(path).extension().string();
  std::transform(ext.begin(), ext.end(), ext.begin(),
                 [](unsigned char c) { return char(std::tolower(c)); });
  return ext;
}

SpinMatrix read_matrix(const std::string& path, const ReadOptions& options) {
  const std::string ext = file_extension(path);
  if (ext == ".npy") {
    if (!options.member.empty())
      throw InputError(path + ": a member name applies to .npz archives only");
    return read_npy_matrix(path, options.convention);
  }
  if (ext == ".npz") return read_npz_matrix(path, options);
  if (ext == ".csv" || ext == ".tsv" || ext == ".txt")
    return read_csv_matrix(path, options.convention, options.csv);
  throw InputError(path + ": unknown file type '" + ext + "'; expected " + kSupported);
}

void write_matrix(const std::string& path, const SpinMatrix& data) {
  const std::string ext = file_extension(path);
  if (ext == ".npy") return write_npy(path, data);
  if (ext == ".npz") {
    std::map<std::string, NpyArray> arrays{{"X", matrix_to_npy(data)}};
    if (!data.names().empty()) arrays["names"] = strings_to_npy(data.names());
    return write_npz(path, arrays);
  }
  if (ext == ".csv" || ext == ".tsv" || ext == ".txt") return write_csv_matrix(path, data);
  throw InputError(path + ": unknown file type '" + ext + "'; expected " + kSupported);
}

}  // namespace spinfer
