// Atomic file writes: write to a temporary file beside the target, flush it to the disk, then
// rename it over the target, so a reader never sees half a model or report, and a crash or a full
// disk leaves the old file intact. A process killed mid-write may leave its temporary file
// (TARGET.tmp-PID) behind; nothing in residue ever reads one.
#pragma once

#include <filesystem>
#include <string>
#include <string_view>

#include "residue/features/status.hpp"

namespace residue {

// A file written piece by piece and published whole by commit(); destroyed uncommitted, it removes
// its temporary file and leaves the target as it was.
class AtomicTextFile {
 public:
  AtomicTextFile() = default;
  AtomicTextFile(AtomicTextFile&& other) noexcept;
  AtomicTextFile& operator=(AtomicTextFile&& other) noexcept;
  AtomicTextFile(const AtomicTextFile&) = delete;
  AtomicTextFile& operator=(const AtomicTextFile&) = delete;
  ~AtomicTextFile();

  static Result<AtomicTextFile> open(const std::filesystem::path& target);
  // Appends text; a failure is remembered and reported by commit().
  void write(std::string_view text);
  // Writes what is buffered, flushes it to the disk and renames the temporary file onto the target.
  Result<bool> commit();

 private:
  void drain();
  void discard();
  std::filesystem::path target_;
  std::filesystem::path temporary_;
  int fd_ = -1;
  int failure_ = 0;  // errno of the first failed write
  std::string buffer_;
};

// Writes `text` to `target` atomically. On failure (disk full, file size limit, no permission) the
// error names the file and the system's reason, the temporary file is removed and the target is
// untouched.
Result<bool> write_file_atomically(const std::filesystem::path& target, const std::string& text);

}  // namespace residue
