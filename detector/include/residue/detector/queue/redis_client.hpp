// A Redis connection (hiredis behind detector/queue/redis_adapter.cpp, the only file that includes
// it): commands as argument vectors (binary-safe), pipelined batches, our own reply type.
// Not thread-safe: one client per thread.
#pragma once

#include <chrono>
#include <cstddef>
#include <memory>
#include <string>
#include <string_view>
#include <vector>

#include "residue/features/status.hpp"

namespace residue {

// redis://[[user]:password@]host[:port][/db]   (defaults: 127.0.0.1, 6379, db 0)
struct RedisAddress {
  std::string host = "127.0.0.1";
  int port = 6379;
  std::string password;
  int db = 0;
};
Result<RedisAddress> parse_redis_url(const std::string& url);

struct RedisReply {
  enum class Type { kString, kArray, kInteger, kNil, kStatus, kError } type = Type::kNil;
  std::string text;  // string, status or error text
  long long integer = 0;
  std::vector<RedisReply> elements;
  [[nodiscard]] bool is_error() const { return type == Type::kError; }
  [[nodiscard]] bool is_nil() const { return type == Type::kNil; }
  // An error reply that means "not now" rather than "never": Redis still loading its data after a
  // restart (LOADING), a long script (BUSY), a failover or resharding (MASTERDOWN, CLUSTERDOWN,
  // TRYAGAIN, READONLY), memory full until results are collected (OOM), too many clients.
  // The caller waits and tries again.
  [[nodiscard]] bool is_transient_error() const;
};

// The replies in `bytes` (RESP, the Redis serialisation protocol), parsed by hiredis's reader as a
// connection parses them; kCorrupt for a protocol error. A reply cut off at the end is left out.
Result<std::vector<RedisReply>> parse_redis_replies(std::string_view bytes);

// The largest reply a client takes (replies hold results, or jobs that may carry an image's bytes:
// at most `read_count` files within the file limit). A larger one, or a server that keeps sending
// one, is refused as a connection error before it is held in memory.
constexpr std::size_t kMaxRedisReplyBytes = std::size_t{1} << 30;

class RedisClient {
 public:
  // Connects (and authenticates, selects the database). `timeout` bounds connecting and every
  // reply; a blocking command's own wait must be shorter.
  static Result<std::unique_ptr<RedisClient>> connect(const RedisAddress& address,
                                                      std::chrono::milliseconds timeout,
                                                      std::size_t max_reply_bytes = kMaxRedisReplyBytes);
  ~RedisClient();
  RedisClient(const RedisClient&) = delete;
  RedisClient& operator=(const RedisClient&) = delete;

  // One command. A Redis error reply is returned as a reply of type kError; an Error means the
  // connection failed (closed, timed out, refused) and the client must be replaced.
  Result<RedisReply> command(const std::vector<std::string>& argv);
  // Several commands in one round trip; replies in order.
  Result<std::vector<RedisReply>> pipeline(const std::vector<std::vector<std::string>>& commands);

 private:
  RedisClient(void* context, std::size_t max_reply_bytes)
      : context_(context), max_reply_bytes_(max_reply_bytes) {}
  void* context_;  // redisContext*
  std::size_t max_reply_bytes_;
};

}  // namespace residue
