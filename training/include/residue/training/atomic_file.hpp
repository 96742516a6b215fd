// Atomic file writes: write to a temporary file beside the target, then rename over it, so a
// reader never sees half a model or report, and a crash leaves the old file intact.
#pragma once

#include <filesystem>
#include <fstream>
#include <memory>
#include <string>

#include "residue/features/status.hpp"

namespace residue {

class AtomicTextFile {
 public:
  AtomicTextFile() = default;
  AtomicTextFile(AtomicTextFile&&) noexcept = default;
  AtomicTextFile& operator=(AtomicTextFile&&) noexcept = default;
  ~AtomicTextFile();  // removes the temporary file unless committed

  static Result<AtomicTextFile> open(const std::filesystem::path& target);
  std::ostream& stream() { return *stream_; }
  // Flushes, closes and renames the temporary file onto the target.
  Result<bool> commit();

 private:
  std::filesystem::path target_;
  std::filesystem::path temporary_;
  std::unique_ptr<std::ofstream> stream_;
  bool committed_ = false;
};

// Writes `text` to `target` atomically.
Result<bool> write_file_atomically(const std::filesystem::path& target, const std::string& text);

}  // namespace residue
