// NumPy .npz archives: a ZIP file with one "<name>.npy" member per array (numpy.savez stores
// members, numpy.savez_compressed deflates them; numpy writes zip64 extra fields even for small
// members). Read and written through libzip, which handles all of these.
#pragma once

#include <map>
#include <string>
#include <vector>

#include "spinfer/npy.hpp"

namespace spinfer {

/// Array names in the archive, in archive order, without the ".npy" suffix.
/// Throws FileError if the file is missing or not a readable ZIP archive.
std::vector<std::string> npz_members(const std::string& path);

/// Reads one member. `member` may be given as "name" or "name.npy"; empty selects the only
/// member, and is an InputError listing the members when there are several.
NpyArray read_npz_member(const std::string& path, const std::string& member = "");

/// Writes the arrays as members "<name>.npy" (stored, or deflated if `compress`), atomically.
void write_npz(const std::string& path, const std::map<std::string, NpyArray>& arrays,
               bool compress = false);

}  // namespace spinfer
