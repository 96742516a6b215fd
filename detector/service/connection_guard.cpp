#include "connection_guard.hpp"

#include <arpa/inet.h>
#include <dirent.h>
#include <netinet/in.h>
#include <sys/socket.h>
#include <unistd.h>

#include <cstdlib>
#include <vector>

namespace residue {

namespace {

using Clock = std::chrono::steady_clock;

enum class Phase { kHead, kBody, kWorking };

// "address:port" of the socket's far end, or empty when it is not a connected TCP socket of `port`
// (another file, the listening socket, a connection already reset).
std::string peer_on_port(int fd, int port) {
  sockaddr_storage local{};
  socklen_t length = sizeof local;
  if (::getsockname(fd, reinterpret_cast<sockaddr*>(&local), &length) != 0) return {};
  int local_port = -1;
  if (local.ss_family == AF_INET) {
    local_port = ntohs(reinterpret_cast<const sockaddr_in*>(&local)->sin_port);
  } else if (local.ss_family == AF_INET6) {
    local_port = ntohs(reinterpret_cast<const sockaddr_in6*>(&local)->sin6_port);
  }
  if (local_port != port) return {};
  int listening = 0;
  length = sizeof listening;
  if (::getsockopt(fd, SOL_SOCKET, SO_ACCEPTCONN, &listening, &length) != 0 || listening != 0) return {};
  sockaddr_storage remote{};
  length = sizeof remote;
  if (::getpeername(fd, reinterpret_cast<sockaddr*>(&remote), &length) != 0) return {};
  char address[INET6_ADDRSTRLEN] = {};
  int remote_port = 0;
  if (remote.ss_family == AF_INET) {
    const auto* in = reinterpret_cast<const sockaddr_in*>(&remote);
    ::inet_ntop(AF_INET, &in->sin_addr, address, sizeof address);
    remote_port = ntohs(in->sin_port);
  } else {
    const auto* in6 = reinterpret_cast<const sockaddr_in6*>(&remote);
    ::inet_ntop(AF_INET6, &in6->sin6_addr, address, sizeof address);
    remote_port = ntohs(in6->sin6_port);
  }
  return std::string(address) + ":" + std::to_string(remote_port);
}

}  // namespace

struct ConnectionGuard::Connection {
  int fd = -1;
  std::string peer;
  std::atomic<Phase> phase{Phase::kHead};
  std::atomic<Clock::rep> deadline{0};  // 0: none
  std::atomic<bool> cut{false};
  ConnectionLimits limits;

  void enter(Phase next, std::chrono::milliseconds allowed) {
    phase = next;
    deadline = allowed.count() > 0 ? (Clock::now() + allowed).time_since_epoch().count() : 0;
  }
};

namespace {
thread_local std::shared_ptr<ConnectionGuard::Connection> t_connection;
}  // namespace

void connection_reading_body() {
  if (t_connection) t_connection->enter(Phase::kBody, t_connection->limits.body_timeout);
}

void connection_working() {
  if (t_connection) t_connection->enter(Phase::kWorking, std::chrono::milliseconds(0));
}

void connection_answered() {
  if (t_connection) t_connection->enter(Phase::kHead, t_connection->limits.header_timeout);
}

ConnectionGuard::ConnectionGuard(ConnectionLimits limits, std::shared_ptr<ConnectionCounts> counts)
    : limits_(std::move(limits)), counts_(std::move(counts)), watchdog_([this] { watch(); }) {}

ConnectionGuard::~ConnectionGuard() { ConnectionGuard::shutdown(); }

// The socket the HTTP library has just accepted: the one connected socket of our port that no
// open connection holds yet (enqueue runs on the accepting thread right after accept(2)); -1 when
// there is not exactly one (the client has already gone).
int ConnectionGuard::find_new_socket(std::string& peer) {
  DIR* dir = ::opendir("/proc/self/fd");
  if (dir == nullptr) return -1;
  int found = -1;
  int candidates = 0;
  while (const dirent* entry = ::readdir(dir)) {
    char* end = nullptr;
    const long fd = std::strtol(entry->d_name, &end, 10);
    if (end == entry->d_name || *end != '\0' || fd == ::dirfd(dir)) continue;
    std::string p = peer_on_port(static_cast<int>(fd), limits_.port);
    if (p.empty() || open_.contains({static_cast<int>(fd), p})) continue;
    ++candidates;
    found = static_cast<int>(fd);
    peer = std::move(p);
  }
  ::closedir(dir);
  return candidates == 1 ? found : -1;
}

void ConnectionGuard::enqueue(std::function<void()> fn) {
  std::unique_lock lock(mutex_);
  std::string peer;
  const int fd = find_new_socket(peer);
  if (fd >= 0 && counts_->open >= limits_.max_connections) {
    // Over the cap: a short answer and the socket closed here (the library's closure, which would
    // have closed it, is dropped). What the client already sent is read first, so that closing
    // does not reset the connection before the answer arrives.
    lock.unlock();
    ++counts_->refused;
    const std::string& answer = limits_.refusal;
    (void)::send(fd, answer.data(), answer.size(), MSG_NOSIGNAL | MSG_DONTWAIT);
    ::shutdown(fd, SHUT_WR);
    char sink[4096];
    while (::recv(fd, sink, sizeof sink, MSG_DONTWAIT) > 0) {
    }
    ::close(fd);
    return;
  }
  auto connection = std::make_shared<Connection>();
  connection->fd = fd;
  connection->peer = peer;
  connection->limits = limits_;
  connection->enter(Phase::kHead, limits_.header_timeout);
  // A socket that could not be told apart (fd < 0) is served without deadlines.
  if (fd >= 0) open_[{fd, peer}] = connection;
  ++counts_->open;
  ++threads_;
  lock.unlock();
  std::thread([this, connection, fn = std::move(fn)]() mutable {
    t_connection = connection->fd >= 0 ? connection : nullptr;
    fn();  // serves the connection's requests, then closes the socket
    fn = nullptr;
    t_connection.reset();
    std::lock_guard done(mutex_);
    if (connection->fd >= 0) open_.erase({connection->fd, connection->peer});
    --counts_->open;
    --threads_;
    changed_.notify_all();  // under the lock: once it is released, `this` may be gone
  }).detach();
}

void ConnectionGuard::watch() {
  std::unique_lock lock(mutex_);
  while (!stopping_) {
    changed_.wait_for(lock, std::chrono::milliseconds(100));
    const auto now = Clock::now().time_since_epoch().count();
    for (auto& [key, connection] : open_) {
      const auto deadline = connection->deadline.load();
      if (deadline == 0 || now < deadline || connection->cut) continue;
      // The descriptor is still this connection's as long as its entry is open (the entry goes
      // after the library closes the socket, and a reused number has another peer).
      if (peer_on_port(key.first, limits_.port) != key.second) continue;
      const Phase phase = connection->phase;  // before the cut, which moves the connection on
      ::shutdown(key.first, SHUT_RDWR);       // the blocked read returns; the library closes the socket
      connection->cut = true;
      ++(phase == Phase::kBody ? counts_->body_timeouts : counts_->head_timeouts);
    }
  }
}

void ConnectionGuard::shutdown() {
  std::unique_lock lock(mutex_);
  // Stopping: connections waiting for a request go at once; requests being read or answered finish.
  for (auto& [key, connection] : open_) {
    if (connection->phase == Phase::kHead) connection->deadline = 1;
  }
  changed_.wait(lock, [&] { return threads_ == 0; });
  if (stopping_) return;
  stopping_ = true;
  changed_.notify_all();
  lock.unlock();
  if (watchdog_.joinable()) watchdog_.join();
}

}  // namespace residue
