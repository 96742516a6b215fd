#include "metrics.hpp"

#include <cstdio>

namespace residue {

void Metrics::observe(const std::string& route, int status, double seconds, const std::string& band) {
  std::lock_guard lock(mutex_);
  ++requests_[{route, status}];
  for (size_t b = 0; b < std::size(kLatencyBuckets); ++b) {
    if (seconds <= kLatencyBuckets[b]) ++buckets_[b];
  }
  ++count_;
  sum_ += seconds;
  if (!band.empty()) ++bands_[band];
}

std::string Metrics::text(int queue_depth, int in_flight, const std::string& model_id,
                          const ConnectionCounts& c) {
  std::lock_guard lock(mutex_);
  std::string t;
  t += "# HELP residue_requests_total HTTP requests by route and status.\n# TYPE residue_requests_total "
       "counter\n";
  for (const auto& [key, n] : requests_) {
    t += "residue_requests_total{route=\"" + key.first + "\",status=\"" + std::to_string(key.second) +
         "\"} " + std::to_string(n) + "\n";
  }
  t += "# HELP residue_request_duration_seconds Time from request read to response.\n"
       "# TYPE residue_request_duration_seconds histogram\n";
  char buf[96];
  for (size_t b = 0; b < std::size(kLatencyBuckets); ++b) {
    std::snprintf(buf, sizeof buf, "residue_request_duration_seconds_bucket{le=\"%g\"} %llu\n",
                  kLatencyBuckets[b], static_cast<unsigned long long>(buckets_[b]));
    t += buf;
  }
  t += "residue_request_duration_seconds_bucket{le=\"+Inf\"} " + std::to_string(count_) + "\n";
  std::snprintf(buf, sizeof buf, "residue_request_duration_seconds_sum %.6f\n", sum_);
  t += buf;
  t += "residue_request_duration_seconds_count " + std::to_string(count_) + "\n";
  t += "# HELP residue_queue_depth Score requests waiting for a worker.\n# TYPE residue_queue_depth gauge\n"
       "residue_queue_depth " +
       std::to_string(queue_depth) + "\n";
  t += "# HELP residue_in_flight Score requests being scored.\n# TYPE residue_in_flight "
       "gauge\nresidue_in_flight " +
       std::to_string(in_flight) + "\n";
  t += "# HELP residue_scores_total Scored images by band.\n# TYPE residue_scores_total counter\n";
  for (const char* band : {"likely-camera", "inconclusive", "likely-generated"}) {
    t += "residue_scores_total{band=\"" + std::string(band) + "\"} " + std::to_string(bands_[band]) + "\n";
  }
  t += "# HELP residue_connections_open HTTP connections open now.\n# TYPE residue_connections_open gauge\n"
       "residue_connections_open " +
       std::to_string(c.open.load()) + "\n";
  t += "# HELP residue_connections_refused_total Connections refused over the cap (503, closed).\n"
       "# TYPE residue_connections_refused_total counter\nresidue_connections_refused_total " +
       std::to_string(c.refused.load()) + "\n";
  t += "# HELP residue_connections_timed_out_total Connections cut for sending a request too slowly.\n"
       "# TYPE residue_connections_timed_out_total counter\n"
       "residue_connections_timed_out_total{phase=\"head\"} " +
       std::to_string(c.head_timeouts.load()) + "\nresidue_connections_timed_out_total{phase=\"body\"} " +
       std::to_string(c.body_timeouts.load()) + "\n";
  t += "# HELP residue_model_info The model being served.\n# TYPE residue_model_info "
       "gauge\nresidue_model_info{id=\"" +
       model_id + "\"} 1\n";
  return t;
}

}  // namespace residue
