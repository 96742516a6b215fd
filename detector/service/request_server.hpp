// The HTTP library's server as the service uses it: able to answer one request given as bytes
// (what the fuzz target, tests/fuzz/fuzz_service.cpp, feeds it) and to listen with a full backlog.
#pragma once

#include <httplib.h>
#include <sys/socket.h>

#include <algorithm>
#include <string>
#include <string_view>

namespace residue {

// One connection's bytes in memory in place of a socket.
class MemoryStream : public httplib::Stream {
 public:
  explicit MemoryStream(std::string_view input) : input_(input) {}
  [[nodiscard]] bool is_readable() const override { return at_ < input_.size(); }
  [[nodiscard]] bool is_writable() const override { return true; }
  ssize_t read(char* ptr, size_t size) override {
    const size_t n = std::min(size, input_.size() - at_);
    std::copy_n(input_.data() + at_, n, ptr);
    at_ += n;
    return static_cast<ssize_t>(n);
  }
  ssize_t write(const char* ptr, size_t size) override {
    output_.append(ptr, size);
    return static_cast<ssize_t>(size);
  }
  void get_remote_ip_and_port(std::string& ip, int& port) const override {
    ip = "127.0.0.1";
    port = 0;
  }
  void get_local_ip_and_port(std::string& ip, int& port) const override {
    ip = "127.0.0.1";
    port = 0;
  }
  [[nodiscard]] socket_t socket() const override { return INVALID_SOCKET; }
  [[nodiscard]] const std::string& output() const { return output_; }

 private:
  std::string_view input_;
  size_t at_ = 0;
  std::string output_;
};

class RequestServer : public httplib::Server {
 public:
  std::string respond(std::string_view request) {
    MemoryStream stream(request);
    bool closed = false;
    process_request(stream, true, closed, nullptr);
    return stream.output();
  }
  // The library listens with a backlog of 5: a burst of connections beyond it has its SYNs dropped
  // and each such client waits a second for the retransmission. Listening again raises it.
  void widen_backlog() { ::listen(svr_sock_, SOMAXCONN); }
};

}  // namespace residue
