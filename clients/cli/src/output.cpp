// output.cpp: see output.h.
#include "output.h"

#include <fcntl.h>
#include <unistd.h>

#include <algorithm>
#include <cerrno>
#include <cstring>
#include <utility>

namespace pitchwire::cli {

Output::Output(int fd, bool owns_fd, std::size_t capacity) : fd_(fd), owns_fd_(owns_fd), buffer_(capacity) {}

Output::Output(Output&& other) noexcept
    : fd_(std::exchange(other.fd_, -1)),
      owns_fd_(std::exchange(other.owns_fd_, false)),
      error_(other.error_),
      buffer_(std::move(other.buffer_)),
      used_(std::exchange(other.used_, 0)) {}

Output::~Output() {
  if (fd_ >= 0) {
    flush();
    if (owns_fd_) ::close(fd_);
  }
}

Output Output::to_file(const std::string& path) {
  const int fd = ::open(path.c_str(), O_WRONLY | O_CREAT | O_TRUNC | O_CLOEXEC, 0666);
  Output out(fd, true);
  if (fd < 0) out.error_ = errno == 0 ? EIO : errno;
  return out;
}

void Output::write(std::string_view text) {
  if (error_ != 0) return;
  while (!text.empty()) {
    if (used_ == buffer_.size()) {
      drain();
      if (error_ != 0) return;
    }
    const std::size_t n = std::min(text.size(), buffer_.size() - used_);
    std::memcpy(buffer_.data() + used_, text.data(), n);
    used_ += n;
    text.remove_prefix(n);
  }
}

bool Output::flush() {
  if (error_ == 0) drain();
  return ok();
}

void Output::drain() {
  std::size_t done = 0;
  while (done < used_) {
    const ssize_t n = ::write(fd_, buffer_.data() + done, used_ - done);
    if (n < 0) {
      if (errno == EINTR) continue;
      error_ = errno == 0 ? EIO : errno;
      break;
    }
    done += static_cast<std::size_t>(n);
  }
  used_ = 0;
}

bool Output::closed() const { return error_ == EPIPE; }

std::string Output::error_message() const { return error_ == 0 ? std::string() : std::strerror(error_); }

}  // namespace pitchwire::cli
