#include "residue/training/atomic_file.hpp"

#include <unistd.h>

#include <cerrno>
#include <cstring>

namespace residue {

AtomicTextFile::~AtomicTextFile() {
  if (stream_ && !committed_) {
    stream_.reset();
    std::error_code ec;
    std::filesystem::remove(temporary_, ec);
  }
}

Result<AtomicTextFile> AtomicTextFile::open(const std::filesystem::path& target) {
  AtomicTextFile file;
  file.target_ = target;
  file.temporary_ = target;
  file.temporary_ += ".tmp-" + std::to_string(::getpid());
  file.stream_ = std::make_unique<std::ofstream>(file.temporary_, std::ios::binary | std::ios::trunc);
  if (!*file.stream_) {
    return make_error(ErrorCode::kUnreadable,
                      "cannot write " + file.temporary_.string() + ": " + std::strerror(errno));
  }
  return file;
}

Result<bool> AtomicTextFile::commit() {
  stream_->flush();
  const bool good = stream_->good();
  stream_->close();
  if (!good) return make_error(ErrorCode::kInternal, "write to " + temporary_.string() + " failed");
  std::error_code ec;
  std::filesystem::rename(temporary_, target_, ec);
  if (ec)
    return make_error(ErrorCode::kInternal, "cannot rename onto " + target_.string() + ": " + ec.message());
  committed_ = true;
  return true;
}

Result<bool> write_file_atomically(const std::filesystem::path& target, const std::string& text) {
  auto file = AtomicTextFile::open(target);
  if (!file) return file.error();
  file->stream() << text;
  return file->commit();
}

}  // namespace residue
