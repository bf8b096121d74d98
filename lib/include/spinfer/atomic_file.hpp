// Atomic output: content is written to a temporary file in the destination's folder, flushed to
// disk, then renamed over the destination. A reader never sees a half-written file, and a failure
// or interruption leaves no output behind (the temporary file is removed).
#pragma once

#include <functional>
#include <ostream>
#include <string>

namespace spinfer {

/// Calls `write(stream)` on a temporary sibling of `path`, then renames it to `path`.
/// Throws FileError if the folder is not writable or any write fails; exceptions thrown by
/// `write` propagate after the temporary file is removed.
void write_file_atomically(const std::string& path, const std::function<void(std::ostream&)>& write);

}  // namespace spinfer
