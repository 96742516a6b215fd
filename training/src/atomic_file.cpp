#include "residue/training/atomic_file.hpp"

#include <fcntl.h>
#include <unistd.h>

#include <cerrno>
#include <cstring>
#include <utility>

namespace residue {

namespace {

Error write_error(const std::filesystem::path& path, int error_number) {
  return {ErrorCode::kInternal, "cannot write " + path.string() + ": " + std::strerror(error_number)};
}

// Writes all of `text` to `fd`, retrying short writes and interruptions; the errno of a failure.
int write_all(int fd, const std::string& text) {
  size_t done = 0;
  while (done < text.size()) {
    const ssize_t n = ::write(fd, text.data() + done, text.size() - done);
    if (n < 0) {
      if (errno == EINTR) continue;
      return errno;
    }
    done += static_cast<size_t>(n);
  }
  return 0;
}

}  // namespace

AtomicTextFile::AtomicTextFile(AtomicTextFile&& other) noexcept { *this = std::move(other); }

AtomicTextFile& AtomicTextFile::operator=(AtomicTextFile&& other) noexcept {
  if (this != &other) {
    discard();
    target_ = std::move(other.target_);
    temporary_ = std::move(other.temporary_);
    fd_ = std::exchange(other.fd_, -1);
    failure_ = other.failure_;
    buffer_ = std::move(other.buffer_);
  }
  return *this;
}

AtomicTextFile::~AtomicTextFile() { discard(); }

void AtomicTextFile::discard() {
  if (fd_ < 0) return;
  ::close(fd_);
  ::unlink(temporary_.c_str());
  fd_ = -1;
}

Result<AtomicTextFile> AtomicTextFile::open(const std::filesystem::path& target) {
  AtomicTextFile file;
  file.target_ = target;
  file.temporary_ = target;
  file.temporary_ += ".tmp-" + std::to_string(::getpid());
  file.fd_ = ::open(file.temporary_.c_str(), O_WRONLY | O_CREAT | O_TRUNC | O_CLOEXEC, 0666);
  if (file.fd_ < 0) return write_error(file.temporary_, errno);
  return file;
}

void AtomicTextFile::write(std::string_view text) {
  buffer_ += text;
  if (buffer_.size() >= (1U << 16)) drain();
}

void AtomicTextFile::drain() {
  if (failure_ == 0) failure_ = write_all(fd_, buffer_);
  buffer_.clear();
}

Result<bool> AtomicTextFile::commit() {
  if (fd_ < 0) return make_error(ErrorCode::kInternal, "no file open for " + target_.string());
  drain();
  // fsync before the rename: otherwise a power cut can leave the new name on an empty file.
  int failure = failure_;
  if (failure == 0 && ::fsync(fd_) != 0) failure = errno;
  if (::close(fd_) != 0 && failure == 0) failure = errno;
  fd_ = -1;
  if (failure == 0 && ::rename(temporary_.c_str(), target_.c_str()) != 0) failure = errno;
  if (failure != 0) {
    ::unlink(temporary_.c_str());
    return write_error(target_, failure);
  }
  // The rename itself is made durable by syncing the folder that holds it (best effort).
  const std::filesystem::path folder = target_.has_parent_path() ? target_.parent_path() : ".";
  if (const int dir = ::open(folder.c_str(), O_RDONLY | O_DIRECTORY | O_CLOEXEC); dir >= 0) {
    ::fsync(dir);
    ::close(dir);
  }
  return true;
}

Result<bool> write_file_atomically(const std::filesystem::path& target, const std::string& text) {
  auto file = AtomicTextFile::open(target);
  if (!file) return file.error();
  file->write(text);
  return file->commit();
}

}  // namespace residue
