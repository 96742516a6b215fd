#include <hiredis/hiredis.h>

#include <algorithm>
#include <charconv>
#include <cstdio>
#include <memory>

#include "residue/detector/queue/redis_client.hpp"

namespace residue {

namespace {

RedisReply convert(const redisReply* r) {
  RedisReply out;
  switch (r->type) {
    case REDIS_REPLY_STRING:
      out.type = RedisReply::Type::kString;
      out.text.assign(r->str, r->len);
      break;
    case REDIS_REPLY_STATUS:
      out.type = RedisReply::Type::kStatus;
      out.text.assign(r->str, r->len);
      break;
    case REDIS_REPLY_ERROR:
      out.type = RedisReply::Type::kError;
      out.text.assign(r->str, r->len);
      break;
    case REDIS_REPLY_INTEGER:
      out.type = RedisReply::Type::kInteger;
      out.integer = r->integer;
      break;
    case REDIS_REPLY_ARRAY:
      out.type = RedisReply::Type::kArray;
      out.elements.reserve(r->elements);
      for (size_t i = 0; i < r->elements; ++i) out.elements.push_back(convert(r->element[i]));
      break;
    default:
      out.type = RedisReply::Type::kNil;
  }
  return out;
}

// hiredis (0.14) allocates an array reply's element table as soon as it reads the count, before
// any element arrives: "*1700000000" alone asks for 13 GB (found by fuzz_redis_reply). Replies we
// ask for hold at most a few thousand elements, so a larger count is refused as a protocol error.
constexpr int kMaxArrayElements = 1'000'000;
void* (*g_create_array)(const redisReadTask*, int) = nullptr;

void* create_bounded_array(const redisReadTask* task, int elements) {
  if (elements > kMaxArrayElements) return nullptr;  // the reader reports "Out of memory"
  return g_create_array(task, elements);
}

// hiredis's own reply functions with the array count bounded; lives as long as the program.
redisReplyObjectFunctions* bounded_functions() {
  static redisReplyObjectFunctions functions = [] {
    redisReader* probe = redisReaderCreate();
    redisReplyObjectFunctions f = *probe->fn;
    redisReaderFree(probe);
    g_create_array = f.createArray;
    f.createArray = create_bounded_array;
    return f;
  }();
  return &functions;
}

Error connection_error(const redisContext* c, const std::string& what) {
  return Error{ErrorCode::kUnreadable,
               "Redis " + what + ": " + (c != nullptr && c->err != 0 ? std::string(c->errstr) : "no reply")};
}

void arguments(const std::vector<std::string>& argv, std::vector<const char*>& ptrs,
               std::vector<size_t>& lens) {
  ptrs.clear();
  lens.clear();
  for (const auto& a : argv) {
    ptrs.push_back(a.data());
    lens.push_back(a.size());
  }
}

// hiredis's blocking redisGetReply, except that it gives up once the data read for the reply
// passes `max_bytes`: hiredis buffers a bulk string until all of its declared length has arrived,
// so "$2000000000" from a hostile or broken server would otherwise be held whole.
int get_bounded_reply(redisContext* c, std::size_t max_bytes, void** reply) {
  *reply = nullptr;
  if (redisGetReplyFromReader(c, reply) != REDIS_OK) return REDIS_ERR;
  if (*reply != nullptr) return REDIS_OK;
  int written = 0;
  while (written == 0) {
    if (redisBufferWrite(c, &written) != REDIS_OK) return REDIS_ERR;
  }
  while (*reply == nullptr) {
    if (redisBufferRead(c) != REDIS_OK) return REDIS_ERR;
    if (c->reader->len > max_bytes) {
      c->err = REDIS_ERR_PROTOCOL;
      std::snprintf(c->errstr, sizeof c->errstr, "reply larger than %zu bytes refused", max_bytes);
      return REDIS_ERR;
    }
    if (redisGetReplyFromReader(c, reply) != REDIS_OK) return REDIS_ERR;
  }
  return REDIS_OK;
}

bool parse_int(const std::string& s, int& out) {
  const auto [end, ec] = std::from_chars(s.data(), s.data() + s.size(), out);
  return ec == std::errc() && end == s.data() + s.size();
}

}  // namespace

bool RedisReply::is_transient_error() const {
  if (!is_error()) return false;
  // The first word of an error reply is its kind (Redis protocol specification, "RESP errors").
  const std::string kind = text.substr(0, text.find(' '));
  static const std::vector<std::string> kTransient = {"LOADING",     "BUSY",     "TRYAGAIN", "MASTERDOWN",
                                                      "CLUSTERDOWN", "READONLY", "OOM"};
  if (std::find(kTransient.begin(), kTransient.end(), kind) != kTransient.end()) return true;
  return text.rfind("ERR max number of clients reached", 0) == 0;
}

Result<std::vector<RedisReply>> parse_redis_replies(std::string_view bytes) {
  std::unique_ptr<redisReader, decltype(&redisReaderFree)> reader(
      redisReaderCreateWithFunctions(bounded_functions()), redisReaderFree);
  if (!reader) return make_error(ErrorCode::kInternal, "hiredis: no reader");
  if (redisReaderFeed(reader.get(), bytes.data(), bytes.size()) != REDIS_OK) {
    return make_error(ErrorCode::kCorrupt, "hiredis: cannot feed the reader");
  }
  std::vector<RedisReply> out;
  while (true) {
    void* raw = nullptr;
    if (redisReaderGetReply(reader.get(), &raw) != REDIS_OK) {
      return make_error(ErrorCode::kCorrupt, std::string("RESP protocol error: ") + reader->errstr);
    }
    if (raw == nullptr) return out;
    out.push_back(convert(static_cast<redisReply*>(raw)));
    freeReplyObject(raw);
  }
}

Result<RedisAddress> parse_redis_url(const std::string& url) {
  const std::string scheme = "redis://";
  if (url.rfind(scheme, 0) != 0) {
    return make_error(ErrorCode::kUnsupported, "Redis URL must start with redis:// (got '" + url + "')");
  }
  RedisAddress a;
  std::string rest = url.substr(scheme.size());
  if (const auto at = rest.rfind('@'); at != std::string::npos) {
    const std::string credentials = rest.substr(0, at);
    const auto colon = credentials.find(':');
    a.password = colon == std::string::npos ? credentials : credentials.substr(colon + 1);
    rest = rest.substr(at + 1);
  }
  if (const auto slash = rest.find('/'); slash != std::string::npos) {
    const std::string db = rest.substr(slash + 1);
    if (!db.empty() && !parse_int(db, a.db))
      return make_error(ErrorCode::kUnsupported, "bad database in " + url);
    rest = rest.substr(0, slash);
  }
  if (const auto colon = rest.rfind(':'); colon != std::string::npos) {
    if (!parse_int(rest.substr(colon + 1), a.port) || a.port <= 0 || a.port > 65535) {
      return make_error(ErrorCode::kUnsupported, "bad port in " + url);
    }
    rest = rest.substr(0, colon);
  }
  if (!rest.empty()) a.host = rest;
  return a;
}

Result<std::unique_ptr<RedisClient>> RedisClient::connect(const RedisAddress& address,
                                                          std::chrono::milliseconds timeout,
                                                          std::size_t max_reply_bytes) {
  const timeval tv{static_cast<time_t>(timeout.count() / 1000),
                   static_cast<suseconds_t>((timeout.count() % 1000) * 1000)};
  redisContext* c = redisConnectWithTimeout(address.host.c_str(), address.port, tv);
  if (c == nullptr || c->err != 0) {
    Error e = connection_error(c, "connect to " + address.host + ":" + std::to_string(address.port));
    if (c != nullptr) redisFree(c);
    return e;
  }
  redisSetTimeout(c, tv);
  c->reader->fn = bounded_functions();
  std::unique_ptr<RedisClient> client(new RedisClient(c, max_reply_bytes));
  if (!address.password.empty()) {
    auto r = client->command({"AUTH", address.password});
    if (!r) return r.error();
    if (r->is_transient_error()) return make_error(ErrorCode::kUnreadable, "Redis is not ready: " + r->text);
    if (r->is_error()) return make_error(ErrorCode::kUnsupported, "Redis refused the password: " + r->text);
  }
  if (address.db != 0) {
    auto r = client->command({"SELECT", std::to_string(address.db)});
    if (!r) return r.error();
    if (r->is_transient_error()) return make_error(ErrorCode::kUnreadable, "Redis is not ready: " + r->text);
    if (r->is_error()) return make_error(ErrorCode::kUnsupported, "Redis refused the database: " + r->text);
  }
  return client;
}

RedisClient::~RedisClient() { redisFree(static_cast<redisContext*>(context_)); }

Result<RedisReply> RedisClient::command(const std::vector<std::string>& argv) {
  auto* c = static_cast<redisContext*>(context_);
  std::vector<const char*> ptrs;
  std::vector<size_t> lens;
  arguments(argv, ptrs, lens);
  void* reply = nullptr;
  if (redisAppendCommandArgv(c, static_cast<int>(ptrs.size()), ptrs.data(), lens.data()) != REDIS_OK ||
      get_bounded_reply(c, max_reply_bytes_, &reply) != REDIS_OK || reply == nullptr) {
    return connection_error(c, argv.empty() ? "command" : argv[0]);
  }
  RedisReply out = convert(static_cast<redisReply*>(reply));
  freeReplyObject(reply);
  return out;
}

Result<std::vector<RedisReply>> RedisClient::pipeline(const std::vector<std::vector<std::string>>& commands) {
  auto* c = static_cast<redisContext*>(context_);
  std::vector<const char*> ptrs;
  std::vector<size_t> lens;
  for (const auto& argv : commands) {
    arguments(argv, ptrs, lens);
    if (redisAppendCommandArgv(c, static_cast<int>(ptrs.size()), ptrs.data(), lens.data()) != REDIS_OK) {
      return connection_error(c, "pipeline");
    }
  }
  std::vector<RedisReply> out;
  out.reserve(commands.size());
  for (size_t i = 0; i < commands.size(); ++i) {
    void* raw = nullptr;
    if (get_bounded_reply(c, max_reply_bytes_, &raw) != REDIS_OK || raw == nullptr) {
      return connection_error(c, "pipeline");
    }
    out.push_back(convert(static_cast<redisReply*>(raw)));
    freeReplyObject(raw);
  }
  return out;
}

}  // namespace residue
