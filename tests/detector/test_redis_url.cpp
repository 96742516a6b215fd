// Redis URLs as the redis-cli and Redis documentation write them
// (redis://[[user]:password@]host[:port][/db]).
#include <doctest/doctest.h>

#include "residue/detector/redis_client.hpp"

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
