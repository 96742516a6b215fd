// The service's counters, exposed at /metrics in the Prometheus text exposition format 0.0.4:
// requests by route and status, a latency histogram, scores by band, the scoring queue, the
// connections (connection_guard.hpp) and the model served.
#pragma once

#include <iterator>
#include <map>
#include <mutex>
#include <string>
#include <utility>

#include "connection_guard.hpp"

namespace residue {

class Metrics {
 public:
  // One answered request: its route, status, time from read to response, and band (empty if none).
  void observe(const std::string& route, int status, double seconds, const std::string& band);
  // The whole exposition, with the gauges read now.
  std::string text(int queue_depth, int in_flight, const std::string& model_id, const ConnectionCounts& c);

  static constexpr double kLatencyBuckets[] = {0.01, 0.025, 0.05, 0.1, 0.15, 0.25, 0.5, 1.0, 2.5, 5.0};

 private:
  std::mutex mutex_;
  std::map<std::pair<std::string, int>, unsigned long long> requests_;
  unsigned long long buckets_[std::size(kLatencyBuckets)] = {};
  unsigned long long count_ = 0;
  double sum_ = 0.0;
  std::map<std::string, unsigned long long> bands_;
};

}  // namespace residue
