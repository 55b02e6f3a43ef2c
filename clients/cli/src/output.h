// output.h: a buffered writer on a file descriptor that notices when the reader has gone away.
//
// `pitchwire analyze big.wav | head` must stop quietly once `head` exits: SIGPIPE is ignored by the
// command, a write then fails with EPIPE, closed() turns true and the command ends without a message.
#pragma once

#include <cstddef>
#include <string>
#include <string_view>
#include <vector>

namespace pitchwire::cli {

class Output {
 public:
  // Writes to fd; owns_fd closes it on destruction.
  explicit Output(int fd, bool owns_fd = false, std::size_t capacity = std::size_t{1} << 16);
  ~Output();
  Output(const Output&) = delete;
  Output& operator=(const Output&) = delete;

  // Opens (creates or truncates) a file for writing. On failure ok() is false and error() says why.
  static Output to_file(const std::string& path);

  Output(Output&& other) noexcept;
  Output& operator=(Output&&) = delete;

  void write(std::string_view text);
  // Writes everything buffered. Returns ok().
  bool flush();

  [[nodiscard]] bool ok() const { return error_ == 0; }
  [[nodiscard]] bool closed() const;  // the reading end is gone (EPIPE)
  [[nodiscard]] std::string error_message() const;

 private:
  void drain();

  int fd_ = -1;
  bool owns_fd_ = false;
  int error_ = 0;  // errno of the first failure
  std::vector<char> buffer_;
  std::size_t used_ = 0;
};

}  // namespace pitchwire::cli
