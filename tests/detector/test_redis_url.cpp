// Redis URLs as the redis-cli and Redis documentation write them
// (redis://[[user]:password@]host[:port][/db]).
#include <arpa/inet.h>
#include <doctest/doctest.h>
#include <netinet/in.h>
#include <sys/socket.h>
#include <unistd.h>

#include <string>
#include <thread>

#include "residue/detector/queue/redis_client.hpp"

using namespace residue;

TEST_CASE("Redis URLs: defaults, port, password, database") {
  auto a = parse_redis_url("redis://");
  REQUIRE(a);
  CHECK(a->host == "127.0.0.1");
  CHECK(a->port == 6379);
  CHECK(a->db == 0);
  a = parse_redis_url("redis://queue-host:6380");
  REQUIRE(a);
  CHECK(a->host == "queue-host");
  CHECK(a->port == 6380);
  a = parse_redis_url("redis://:s3cret@10.0.0.5:6379/2");
  REQUIRE(a);
  CHECK(a->password == "s3cret");
  CHECK(a->host == "10.0.0.5");
  CHECK(a->db == 2);
  a = parse_redis_url("redis://worker:pa:ss@host");  // user name ignored; the password may hold ':'
  REQUIRE(a);
  CHECK(a->password == "pa:ss");
  CHECK(a->host == "host");
}

TEST_CASE("Redis URLs: refused with a reason") {
  CHECK_FALSE(parse_redis_url("http://localhost:6379"));
  CHECK_FALSE(parse_redis_url("redis://host:port"));
  CHECK_FALSE(parse_redis_url("redis://host:70000"));
  CHECK_FALSE(parse_redis_url("redis://host/x"));
}

// Error replies as redis-server 7 words them (seen on Debian's redis-server 7.0 while writing the
// work-queue tests; the kinds are listed in the Redis documentation of error replies, from memory).
TEST_CASE("Redis error replies: 'not now' is told apart from 'never'") {
  const auto error = [](const std::string& text) {
    RedisReply r;
    r.type = RedisReply::Type::kError;
    r.text = text;
    return r;
  };
  CHECK(error("LOADING Redis is loading the dataset in memory").is_transient_error());
  CHECK(error("BUSY Redis is busy running a script. You can only call SCRIPT KILL or SHUTDOWN NOSAVE.")
            .is_transient_error());
  CHECK(error("MASTERDOWN Link with MASTER is down and replica-serve-stale-data is set to 'no'.")
            .is_transient_error());
  CHECK(error("OOM command not allowed when used memory > 'maxmemory'.").is_transient_error());
  CHECK(error("READONLY You can't write against a read only replica.").is_transient_error());
  CHECK(error("ERR max number of clients reached").is_transient_error());
  // Refusals that waiting does not cure.
  CHECK_FALSE(error("BUSYGROUP Consumer Group name already exists").is_transient_error());
  CHECK_FALSE(error("NOGROUP No such key 'jobs' or consumer group 'residue'").is_transient_error());
  CHECK_FALSE(
      error("WRONGTYPE Operation against a key holding the wrong kind of value").is_transient_error());
  CHECK_FALSE(error("ERR unknown command 'XAUTOCLAIM'").is_transient_error());
  CHECK_FALSE(error("EXECABORT Transaction discarded because of previous errors.").is_transient_error());
  RedisReply status;
  status.type = RedisReply::Type::kStatus;
  status.text = "LOADING";
  CHECK_FALSE(status.is_transient_error());  // only error replies
}

TEST_CASE(
    "Redis replies: the protocol specification's examples (RESP2, redis.io/docs/reference/protocol-spec)") {
  auto r = parse_redis_replies(
      "+OK\r\n:1000\r\n$5\r\nhello\r\n$-1\r\n*2\r\n$3\r\nfoo\r\n$3\r\nbar\r\n-ERR unknown command\r\n");
  REQUIRE(r);
  REQUIRE(r->size() == 6);
  CHECK((*r)[0].type == RedisReply::Type::kStatus);
  CHECK((*r)[0].text == "OK");
  CHECK((*r)[1].integer == 1000);
  CHECK((*r)[2].text == "hello");
  CHECK((*r)[3].is_nil());
  REQUIRE((*r)[4].elements.size() == 2);
  CHECK((*r)[4].elements[1].text == "bar");
  CHECK((*r)[5].is_error());
  CHECK((*r)[5].text == "ERR unknown command");
  // Binary-safe bulk strings: a CR LF and a NUL inside the payload.
  auto bin = parse_redis_replies(std::string("$4\r\na\r\n\0\r\n", 10));
  REQUIRE(bin);
  CHECK((*bin)[0].text == std::string("a\r\n\0", 4));
  // A reply cut off at the end is left out; a protocol error is an error.
  auto cut = parse_redis_replies("+OK\r\n$10\r\nhal");
  REQUIRE(cut);
  CHECK(cut->size() == 1);
  CHECK_FALSE(parse_redis_replies("?what\r\n"));
  // fuzz_redis_reply, 2026-12-03: an array count of 1.7e9 made hiredis allocate 13 GB at once.
  CHECK_FALSE(parse_redis_replies("*1\r\n*1700000000\r\n*2\r\n$15\r\n"));
  CHECK(parse_redis_replies("*3\r\n:1\r\n:2\r\n:3\r\n").ok());
}

namespace {

// A one-connection server on loopback that answers the first command with `answer`, then sends
// `filler` bytes of 'x' (the rest of a bulk string declared far larger than it will ever be).
struct FakeRedis {
  int listener = -1;
  int port = 0;
  std::thread thread;

  FakeRedis(std::string answer, size_t filler) {
    listener = ::socket(AF_INET, SOCK_STREAM, 0);
    sockaddr_in address{};
    address.sin_family = AF_INET;
    address.sin_addr.s_addr = htonl(INADDR_LOOPBACK);
    socklen_t length = sizeof address;
    ::bind(listener, reinterpret_cast<sockaddr*>(&address), sizeof address);
    ::listen(listener, 1);
    ::getsockname(listener, reinterpret_cast<sockaddr*>(&address), &length);
    port = ntohs(address.sin_port);
    thread = std::thread([this, answer = std::move(answer), filler] {
      const int c = ::accept(listener, nullptr, nullptr);
      char command[256];
      (void)::recv(c, command, sizeof command, 0);
      (void)::send(c, answer.data(), answer.size(), MSG_NOSIGNAL);
      const std::string block(1 << 16, 'x');
      for (size_t sent = 0; sent < filler; sent += block.size()) {
        if (::send(c, block.data(), block.size(), MSG_NOSIGNAL) < 0) break;  // the client gave up
      }
      ::close(c);
    });
  }
  ~FakeRedis() {
    thread.join();
    ::close(listener);
  }
};

}  // namespace

TEST_CASE("Redis replies: a bulk string larger than the reply limit is refused before it is held") {
  // RESP: "$<length>\r\n" declares a bulk string's length; hiredis keeps reading until all of it
  // has arrived. With a 1 MiB limit, a server streaming a string declared as 2 GB is cut off after
  // about 1 MiB, and the command fails as a connection error (the client must be replaced).
  FakeRedis server("$2000000000\r\n", 8U << 20);
  RedisAddress address;
  address.port = server.port;
  auto client = RedisClient::connect(address, std::chrono::milliseconds(5000), 1U << 20);
  REQUIRE(client);
  auto reply = (*client)->command({"GET", "job"});
  REQUIRE_FALSE(reply);
  CHECK(reply.error().message.find("reply larger than 1048576 bytes refused") != std::string::npos);
  client->reset();  // closes the socket, so the server's sending stops

  FakeRedis small("$5\r\nhello\r\n", 0);  // within the limit: read as usual
  address.port = small.port;
  auto ok = RedisClient::connect(address, std::chrono::milliseconds(5000), 1U << 20);
  REQUIRE(ok);
  auto hello = (*ok)->command({"GET", "job"});
  REQUIRE(hello);
  CHECK(hello->text == "hello");
}
