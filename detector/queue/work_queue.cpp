#include "residue/detector/queue/work_queue.hpp"

#include <algorithm>
#include <ctime>
#include <filesystem>
#include <fstream>
#include <map>
#include <random>
#include <thread>
#include <unordered_set>

#include "residue/detector/scoring/record.hpp"
#include "residue/features/fingerprint.hpp"

namespace residue {

namespace {

using Clock = std::chrono::steady_clock;

struct Entry {
  std::string id;
  std::map<std::string, std::string> fields;
};

// [[id, [field, value, ...]], ...]
std::vector<Entry> entries_of(const RedisReply& list) {
  std::vector<Entry> out;
  for (const auto& e : list.elements) {
    if (e.elements.size() != 2) continue;
    Entry entry{e.elements[0].text, {}};
    const auto& kv = e.elements[1].elements;
    for (size_t i = 0; i + 1 < kv.size(); i += 2) entry.fields[kv[i].text] = kv[i + 1].text;
    out.push_back(std::move(entry));
  }
  return out;
}

// A connection that comes back: reconnects with doubling, jittered waits (100 ms up to the
// configured maximum) and reports each loss once.
class Link {
 public:
  Link(QueueConnection settings, const std::atomic<bool>* stop, QueueLog log)
      : settings_(std::move(settings)), stop_(stop), log_(std::move(log)) {}

  // Connected, or false when stopping (or, with a deadline, when it has passed).
  bool ensure(std::optional<Clock::time_point> deadline = std::nullopt) {
    auto wait = std::chrono::milliseconds(100);
    while (!client_) {
      auto connected = RedisClient::connect(settings_.address, settings_.timeout);
      if (connected) {
        client_ = std::move(*connected);
        if (lost_) log_("reconnected to Redis");
        lost_ = false;
        break;
      }
      if (connected.error().code == ErrorCode::kUnsupported) {  // wrong password or database: not transient
        fatal_ = connected.error();
        return false;
      }
      if (!lost_) log_(connected.error().message + "; retrying with backoff");
      lost_ = true;
      if ((stop_ != nullptr && *stop_) || (deadline && Clock::now() > *deadline)) return false;
      std::uniform_int_distribution<int> jitter(0, static_cast<int>(wait.count() / 4));
      std::this_thread::sleep_for(wait + std::chrono::milliseconds(jitter(rng_)));
      wait = std::min(wait * 2, settings_.max_backoff);
    }
    return true;
  }
  RedisClient& client() { return *client_; }

  // Redis answered "not now" (RedisReply::is_transient_error): wait, doubling and jittered like a
  // reconnection, and report it once. False when stopping, or when Redis has been answering so
  // for longer than `give_up_after`.
  bool wait_busy(const RedisReply& reply,
                 std::optional<std::chrono::milliseconds> give_up_after = std::nullopt) {
    if (!busy_since_) {
      busy_since_ = Clock::now();
      busy_wait_ = std::chrono::milliseconds(100);
      log_("Redis is not ready (" + reply.text + "); waiting and trying again");
    }
    if (stop_ != nullptr && *stop_) return false;
    if (give_up_after && Clock::now() - *busy_since_ > *give_up_after) return false;
    std::uniform_int_distribution<int> jitter(0, static_cast<int>(busy_wait_.count() / 4));
    std::this_thread::sleep_for(busy_wait_ + std::chrono::milliseconds(jitter(rng_)));
    busy_wait_ = std::min(busy_wait_ * 2, settings_.max_backoff);
    return true;
  }
  // A command went through: the next "not now" is a new episode.
  void ready() {
    if (busy_since_) log_("Redis is ready again");
    busy_since_.reset();
  }

  void drop(const Error& e) {
    log_("lost the Redis connection: " + e.message);
    client_.reset();
    lost_ = true;
    ++reconnects;
  }
  [[nodiscard]] const std::optional<Error>& fatal() const { return fatal_; }
  size_t reconnects = 0;

 private:
  QueueConnection settings_;
  const std::atomic<bool>* stop_;
  QueueLog log_;
  std::unique_ptr<RedisClient> client_;
  bool lost_ = false;
  std::optional<Clock::time_point> busy_since_;
  std::chrono::milliseconds busy_wait_{100};
  std::optional<Error> fatal_;
  std::mt19937 rng_{std::random_device{}()};
};

std::string ms(std::chrono::milliseconds d) { return std::to_string(d.count()); }

// The entry id just after `id` ("ms-seq" -> "ms-(seq+1)"), for XTRIM MINID.
std::string next_id(const std::string& id) {
  const auto dash = id.find('-');
  if (dash == std::string::npos) return id;
  return id.substr(0, dash + 1) + std::to_string(std::stoull(id.substr(dash + 1)) + 1);
}

class Worker {
 public:
  Worker(const Model& model, const WorkerSettings& s, const std::atomic<bool>& stop, const QueueLog& log)
      : model_(model), s_(s), stop_(stop), log_(log), link_(s.connection, &stop, log) {
    if (!s.jsonl_path.empty()) jsonl_.open(s.jsonl_path, std::ios::app);
  }

  Result<WorkerStats> run() {
    if (!s_.jsonl_path.empty() && !jsonl_) {
      return make_error(ErrorCode::kUnreadable, "cannot append to " + s_.jsonl_path);
    }
    auto next_reclaim = Clock::now();
    std::string cursor = "0-0";
    while (!stop_) {
      if (!link_.ensure()) break;
      if (!group_ready_) {
        auto made = link_.client().command({"XGROUP", "CREATE", s_.stream, s_.group, "0", "MKSTREAM"});
        if (!made) {
          link_.drop(made.error());
          continue;
        }
        if (made->is_transient_error()) {
          link_.wait_busy(*made);
          continue;
        }
        if (made->is_error() && made->text.rfind("BUSYGROUP", 0) != 0) {
          return make_error(ErrorCode::kUnsupported, "cannot create consumer group: " + made->text);
        }
        group_ready_ = true;
      }
      std::vector<Entry> entries;
      bool claimed = false;
      if (Clock::now() >= next_reclaim) {
        auto r = link_.client().command({"XAUTOCLAIM", s_.stream, s_.group, s_.consumer, ms(s_.reclaim_after),
                                         cursor, "COUNT", std::to_string(s_.read_count)});
        const auto next = after_read(r, "XAUTOCLAIM");
        if (!next) return next.error();
        if (!*next) continue;
        if (r->elements.size() >= 2) {
          cursor = r->elements[0].text;
          entries = entries_of(r->elements[1]);
          if (r->elements.size() >= 3) acknowledge_deleted(r->elements[2]);
        }
        if (cursor == "0-0") next_reclaim = Clock::now() + s_.reclaim_after / 4;
        claimed = !entries.empty();
        stats_.reclaimed += entries.size();
        if (claimed)
          log_("took over " + std::to_string(entries.size()) + " jobs idle for over " + ms(s_.reclaim_after) +
               " ms");
      }
      if (entries.empty()) {
        auto r = link_.client().command({"XREADGROUP", "GROUP", s_.group, s_.consumer, "COUNT",
                                         std::to_string(s_.read_count), "BLOCK", ms(s_.block), "STREAMS",
                                         s_.stream, ">"});
        const auto next = after_read(r, "XREADGROUP");
        if (!next) return next.error();
        if (!*next) continue;
        if (!r->elements.empty() && r->elements[0].elements.size() == 2)
          entries = entries_of(r->elements[0].elements[1]);
      }
      link_.ready();
      // Jobs read are in flight: finish them even when a stop was asked for meanwhile.
      for (const auto& e : entries) {
        if (auto handled = handle(e, claimed); !handled) return handled.error();
      }
    }
    if (link_.fatal()) return *link_.fatal();
    stats_.reconnects = link_.reconnects;
    return stats_;
  }

 private:
  // A missing group (Redis restarted without persistence, or the stream was deleted) is made again.
  // After XAUTOCLAIM or XREADGROUP: true when the reply holds entries to use; false to read again
  // (connection lost, Redis busy, consumer group recreated); an error when the worker must stop.
  Result<bool> after_read(const Result<RedisReply>& r, const char* command) {
    if (!r) {
      link_.drop(r.error());
      return false;
    }
    if (r->is_transient_error()) {
      link_.wait_busy(*r);
      return false;
    }
    if (r->is_error()) {
      if (!regroup(*r)) return make_error(ErrorCode::kUnsupported, std::string(command) + ": " + r->text);
      return false;
    }
    return true;
  }

  bool regroup(const RedisReply& error) {
    if (error.text.rfind("NOGROUP", 0) == 0) {
      log_("consumer group missing; creating it again");
      group_ready_ = false;
      return true;
    }
    return false;
  }

  void acknowledge_deleted(const RedisReply& ids) {
    for (const auto& id : ids.elements) (void)link_.client().command({"XACK", s_.stream, s_.group, id.text});
  }

  // Times this job was delivered (1 for a fresh read).
  long long deliveries(const std::string& id) {
    auto r = link_.client().command({"XPENDING", s_.stream, s_.group, id, id, "1"});
    if (!r || r->type != RedisReply::Type::kArray || r->elements.empty() ||
        r->elements[0].elements.size() < 4) {
      return 2;
    }
    return r->elements[0].elements[3].integer;
  }

  Result<bool> handle(const Entry& e, bool claimed) {
    const long long delivered = claimed ? deliveries(e.id) : 1;
    const auto field = [&e](const char* name) {
      const auto it = e.fields.find(name);
      return it == e.fields.end() ? std::string() : it->second;
    };
    std::string job = field("job");
    if (job.empty()) job = e.id;
    const std::string path = field("path");
    const auto bytes = e.fields.find("bytes");
    const std::string name = path.empty() ? field("name") : path;
    nlohmann::ordered_json record;
    if (delivered > s_.max_deliveries) {
      record = error_record(name, Error{ErrorCode::kInternal, ""});
      record["error"] = {
          {"code", "gave-up"},
          {"message", "delivered " + std::to_string(delivered) +
                          " times without a result (a worker may have died on it, or a transient "
                          "failure persisted)"}};
      record["model"] = model_.id;
      record["advisory"] = kAdvisoryNotice;
      ++stats_.gave_up;
    } else if (!path.empty()) {
      record = scan_file(path, model_, s_.scan);
    } else if (bytes != e.fields.end()) {
      const auto* data = reinterpret_cast<const std::uint8_t*>(bytes->second.data());
      record = scan_bytes(name, std::span(data, bytes->second.size()), model_, s_.scan);
    } else {
      record = error_record(name, Error{ErrorCode::kUnsupported, "job has neither a path nor image bytes"});
      record["model"] = model_.id;
      record["advisory"] = kAdvisoryNotice;
    }
    if (record.contains("error") && record["error"]["code"] == "unreadable" &&
        delivered < s_.max_deliveries) {
      // Maybe transient (a storage hiccup): leave it pending; it is taken again after reclaim_after.
      ++stats_.retried;
      log_("job " + job + ": " + record["error"]["message"].get<std::string>() + "; will retry");
      return true;
    }
    if (record.contains("error")) {
      stats_.failed += record["error"]["code"] == "gave-up" ? 0 : 1;
    } else {
      ++stats_.scored;
    }
    record["job"] = job;
    record["worker"] = s_.consumer;
    return finish(e.id, job, record_line(record));
  }

  // Result and acknowledgement in one transaction, retried across reconnections until done.
  Result<bool> finish(const std::string& id, const std::string& job, const std::string& record) {
    bool retrying = false;
    while (true) {
      if (!link_.ensure()) {
        if (link_.fatal()) return *link_.fatal();
        return true;  // stopping with Redis away: the job stays pending and is taken over later
      }
      if (retrying) {
        auto pending = link_.client().command({"XPENDING", s_.stream, s_.group, id, id, "1"});
        if (!pending) {
          link_.drop(pending.error());
          continue;
        }
        if (pending->is_transient_error()) {
          if (!link_.wait_busy(*pending)) return true;  // stopping: the job stays pending
          continue;
        }
        if (pending->type == RedisReply::Type::kArray && pending->elements.empty())
          return true;  // done before
      }
      std::vector<std::vector<std::string>> commands = {
          {"MULTI"},
          {"XADD", s_.results, "*", "job", job, "record", record},
          {"XACK", s_.stream, s_.group, id}};
      if (s_.delete_done) commands.push_back({"XDEL", s_.stream, id});
      commands.push_back({"EXEC"});
      auto replies = link_.client().pipeline(commands);
      if (!replies) {
        link_.drop(replies.error());
        retrying = true;
        continue;
      }
      const RedisReply& exec = replies->back();
      const auto not_now = std::find_if(replies->begin(), replies->end(),
                                        [](const RedisReply& r) { return r.is_transient_error(); });
      if (exec.type != RedisReply::Type::kArray && not_now != replies->end()) {
        // Refused (EXECABORT: nothing was written). Check the job is still pending before
        // sending again, in case MULTI itself was refused and the commands ran on their own.
        if (!link_.wait_busy(*not_now)) return true;  // stopping: the job stays pending
        retrying = true;
        continue;
      }
      if (exec.type != RedisReply::Type::kArray) {
        for (const auto& r : *replies) {
          if (r.is_error()) return make_error(ErrorCode::kUnsupported, "writing a result failed: " + r.text);
        }
        return make_error(ErrorCode::kUnsupported, "writing a result failed: transaction aborted");
      }
      link_.ready();
      if (jsonl_) {
        jsonl_ << record << "\n" << std::flush;
        // The result is safe in Redis; the local copy is a convenience, so a full disk is said
        // once and the worker goes on.
        if (!jsonl_) log_("cannot append to " + s_.jsonl_path + " (disk full?); results go on to Redis only");
      }
      return true;
    }
  }

  const Model& model_;
  WorkerSettings s_;
  const std::atomic<bool>& stop_;
  QueueLog log_;
  Link link_;
  bool group_ready_ = false;
  WorkerStats stats_;
  std::ofstream jsonl_;
};

}  // namespace

Result<WorkerStats> run_worker(const Model& model, const WorkerSettings& settings,
                               const std::atomic<bool>& stop, const QueueLog& log) {
  Worker worker(model, settings, stop, log);
  return worker.run();
}

Result<EnqueueStats> enqueue_jobs(const std::vector<std::string>& paths, const EnqueueSettings& s,
                                  const QueueLog& log) {
  EnqueueStats stats;
  Link link(s.connection, nullptr, log);
  const auto deadline = Clock::now() + 3 * s.connection.timeout;
  size_t n = 0;
  std::vector<std::vector<std::string>> batch;
  auto flush = [&]() -> Result<bool> {
    if (batch.empty()) return true;
    if (!link.ensure(deadline)) {
      if (link.fatal()) return *link.fatal();
      return make_error(ErrorCode::kUnreadable, "cannot reach Redis; " + std::to_string(stats.enqueued) +
                                                    " jobs were enqueued before the connection was lost");
    }
    while (!batch.empty()) {
      auto replies = link.client().pipeline(batch);
      if (!replies) {
        return make_error(ErrorCode::kUnreadable,
                          replies.error().message + "; " + std::to_string(stats.enqueued) +
                              " jobs were enqueued before (the last batch may be partly in)");
      }
      // Jobs refused with "not now" are sent again after a wait; their job ids stay the same.
      std::vector<std::vector<std::string>> again;
      const RedisReply* not_now = nullptr;
      for (size_t i = 0; i < replies->size(); ++i) {
        const RedisReply& r = (*replies)[i];
        if (r.is_transient_error()) {
          not_now = &r;
          again.push_back(std::move(batch[i]));
        } else if (r.is_error()) {
          return make_error(ErrorCode::kUnsupported, "XADD refused: " + r.text);
        } else {
          ++stats.enqueued;
        }
      }
      if (not_now != nullptr && !link.wait_busy(*not_now, 3 * s.connection.timeout)) {
        return make_error(ErrorCode::kUnreadable, "Redis stayed not ready (" + not_now->text + "); " +
                                                      std::to_string(stats.enqueued) + " jobs were enqueued");
      }
      if (not_now == nullptr) link.ready();
      batch = std::move(again);
    }
    return true;
  };
  for (const auto& path : paths) {
    std::error_code ec;
    const std::string absolute = std::filesystem::absolute(path, ec).lexically_normal().string();
    const std::string job = s.batch + "/" + std::to_string(n++);
    if (s.send_bytes) {
      DecodeLimits limits;
      limits.max_file_bytes = s.max_file_bytes;
      auto bytes = read_file(path, limits);
      if (!bytes) {
        stats.refused.emplace_back(path, bytes.error());
        continue;
      }
      batch.push_back({"XADD", s.stream, "*", "job", job, "name", absolute, "bytes",
                       std::string(reinterpret_cast<const char*>(bytes->data()), bytes->size())});
    } else {
      batch.push_back({"XADD", s.stream, "*", "job", job, "path", absolute});
    }
    if (batch.size() >= s.pipeline) {
      if (auto f = flush(); !f) return f.error();
    }
  }
  if (auto f = flush(); !f) return f.error();
  return stats;
}

Result<CollectStats> collect_results(const CollectSettings& s,
                                     const std::function<void(const std::string& record_json)>& sink,
                                     const QueueLog& log) {
  CollectStats stats;
  Link link(s.connection, nullptr, log);
  // Without --expect there is nothing to wait for: a few reconnection attempts, then an error.
  const auto deadline = Clock::now() + (s.expect ? s.wait : 3 * s.connection.timeout);
  std::unordered_set<std::uint64_t> seen;  // FNV-1a of job ids: 8 bytes per job
  std::string last = "0-0";
  while (true) {
    const bool waiting = s.expect && stats.records < *s.expect;
    if (!waiting && s.expect) break;
    if (waiting && Clock::now() > deadline) {
      stats.complete = false;
      break;
    }
    if (!link.ensure(deadline)) {
      if (link.fatal()) return *link.fatal();
      if (!s.expect) return make_error(ErrorCode::kUnreadable, "cannot reach Redis");
      stats.complete = false;
      break;
    }
    std::vector<std::string> argv = {"XREAD", "COUNT", "1000"};
    if (waiting) argv.insert(argv.end(), {"BLOCK", "1000"});
    argv.insert(argv.end(), {"STREAMS", s.results, last});
    auto r = link.client().command(argv);
    if (!r) {
      link.drop(r.error());
      continue;
    }
    if (r->is_transient_error()) {
      if (!link.wait_busy(*r, waiting ? std::nullopt : std::optional(3 * s.connection.timeout))) {
        return make_error(ErrorCode::kUnreadable, "Redis stayed not ready: " + r->text);
      }
      continue;
    }
    if (r->is_error()) return make_error(ErrorCode::kUnsupported, "XREAD: " + r->text);
    link.ready();
    if (r->is_nil() || r->elements.empty() || r->elements[0].elements.size() != 2) {
      if (!waiting) break;  // everything there is has been read
      continue;
    }
    for (const auto& e : entries_of(r->elements[0].elements[1])) {
      last = e.id;
      const auto job = e.fields.find("job");
      const auto record = e.fields.find("record");
      if (job == e.fields.end() || record == e.fields.end()) continue;
      if (!seen.insert(fnv1a_64(job->second)).second) {
        ++stats.duplicates;
        continue;
      }
      ++stats.records;
      sink(record->second);
    }
  }
  if (s.trim && last != "0-0" && link.ensure(deadline)) {
    auto r = link.client().command({"XTRIM", s.results, "MINID", next_id(last)});
    if (!r) return r.error();
  }
  return stats;
}

}  // namespace residue
