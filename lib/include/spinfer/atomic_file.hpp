// Atomic output: content is written to a temporary file in the destination's folder, flushed to
// disk, then renamed over the destination. A reader never sees a half-written file, and a failure
// or interruption leaves no output behind (the temporary file is removed).
#pragma once

#include <functional>
#include <ostream>
#include <string>
#include <utility>
#include <vector>

namespace spinfer {

/// Calls `write(stream)` on a temporary sibling of `path`, then renames it to `path`.
/// Throws FileError if the folder is not writable or any write fails; exceptions thrown by
/// `write` propagate after the temporary file is removed.
void write_file_atomically(const std::string& path, const std::function<void(std::ostream&)>& write);

/// One output of write_files_atomically: a destination and the function that writes its content.
using FileOutput = std::pair<std::string, std::function<void(std::ostream&)>>;

/// Several files that belong together (a model file and its couplings file). Every content is
/// first written to a temporary sibling and flushed; only when all are complete are they renamed
/// into place, in the order given. If a rename fails, the files already moved are rolled back
/// (a file they replaced is restored from a hard link or copy kept until the end), so a failure
/// leaves neither new file and the previous files as they were. A reader may briefly see the
/// earlier outputs new and the later ones old: put the file that refers to the others last.
/// Throws like write_file_atomically.
void write_files_atomically(const std::vector<FileOutput>& outputs);

}  // namespace spinfer
