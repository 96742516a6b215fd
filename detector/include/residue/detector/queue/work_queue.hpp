// Work distribution over Redis Streams with consumer groups (docs/queue.md).
//
// Job stream entry: fields "job" (job id) and either "path" (a file the worker can read) or
// "bytes" (the image itself) with "name" (echoed as the record's path).
// Result stream entry: fields "job" and "record" (the scan record as JSON, with "job" and
// "worker" added).
//
// Delivery is at least once. A worker writes the result and acknowledges the job in one
// MULTI/EXEC transaction, so a crash leaves either both or neither; after a lost connection it
// checks whether the job is still pending before writing again. A job whose delivery count passes
// `max_deliveries` (a worker died on it each time, or a transient failure persisted) gets an error
// record with code "gave-up" and is acknowledged, never redelivered forever. `collect` drops
// duplicate job ids all the same.
#pragma once

#include <atomic>
#include <chrono>
#include <functional>
#include <optional>
#include <string>
#include <vector>

#include "residue/detector/queue/redis_client.hpp"
#include "residue/detector/scoring/scan.hpp"

namespace residue {

// Connection settings shared by the three roles.
struct QueueConnection {
  RedisAddress address;
  std::chrono::milliseconds timeout{5000};      // connect and reply timeout
  std::chrono::milliseconds max_backoff{5000};  // reconnect waits double from 100 ms up to this
};

struct WorkerSettings {
  QueueConnection connection;
  std::string stream;    // jobs
  std::string group;     // consumer group (created at the stream's start if missing)
  std::string consumer;  // this worker's name in the group
  std::string results;   // result stream
  ScanSettings scan;
  int read_count = 8;                              // jobs taken per read
  std::chrono::milliseconds block{1000};           // longest wait for new jobs (also the stop latency)
  std::chrono::milliseconds reclaim_after{30000};  // a job pending this long is taken from its worker
  int max_deliveries = 3;                          // then "gave-up"
  bool delete_done = true;                         // XDEL finished jobs so the stream stays small
  std::string jsonl_path;                          // also append each record here (may repeat on retry)
};

struct WorkerStats {
  size_t scored = 0;     // records with a score
  size_t failed = 0;     // error records for bad inputs
  size_t gave_up = 0;    // "gave-up" records
  size_t retried = 0;    // transient failures left for redelivery
  size_t reclaimed = 0;  // jobs taken over from idle workers
  size_t reconnects = 0;
};

using QueueLog = std::function<void(const std::string& line)>;

// Serves jobs until `stop` becomes true; jobs already read are finished and acknowledged first.
// Connection failures are retried with backoff, never fatal; only unusable settings (a wrong
// password, a stream that is not a stream) end it with an error.
Result<WorkerStats> run_worker(const Model& model, const WorkerSettings& settings,
                               const std::atomic<bool>& stop, const QueueLog& log);

struct EnqueueSettings {
  QueueConnection connection;
  std::string stream;
  std::string batch;  // job ids are "<batch>/<n>"
  bool send_bytes = false;
  std::uint64_t max_file_bytes = 200ULL << 20;  // with send_bytes: larger files are refused
  size_t pipeline = 500;                        // XADDs per round trip
};

struct EnqueueStats {
  size_t enqueued = 0;
  std::vector<std::pair<std::string, Error>> refused;  // unreadable or oversized with send_bytes
};

// Appends one job per path (made absolute). Stops at the first connection failure, reporting how
// many jobs were already enqueued.
Result<EnqueueStats> enqueue_jobs(const std::vector<std::string>& paths, const EnqueueSettings& settings,
                                  const QueueLog& log);

struct CollectSettings {
  QueueConnection connection;
  std::string results;
  std::optional<size_t> expect;           // wait until this many distinct jobs have results
  std::chrono::milliseconds wait{60000};  // longest wait for `expect`
  bool trim = false;                      // delete collected entries from the result stream afterwards
};

struct CollectStats {
  size_t records = 0;     // distinct jobs written
  size_t duplicates = 0;  // redelivered results dropped
  bool complete = true;   // false when `expect` was not reached in time
};

// Reads the result stream from its start, calling `sink` once per distinct job id, in stream order.
Result<CollectStats> collect_results(const CollectSettings& settings,
                                     const std::function<void(const std::string& record_json)>& sink,
                                     const QueueLog& log);

}  // namespace residue
