// A one-line progress bar with rate and ETA on stderr, drawn only when stderr is a terminal.
#pragma once

#include <unistd.h>

#include <chrono>
#include <cstdio>
#include <string>

namespace residue::cli {

class Progress {
 public:
  explicit Progress(const char* unit) : unit_(unit), enabled_(::isatty(STDERR_FILENO) != 0) {}

  void update(size_t done, size_t total) const {
    if (!enabled_) return;
    const double s = std::chrono::duration<double>(std::chrono::steady_clock::now() - start_).count();
    const double rate = s > 0 ? static_cast<double>(done) / s : 0.0;
    const double eta = rate > 0 ? static_cast<double>(total - done) / rate : 0.0;
    const int width = 30;
    const int filled = total > 0 ? static_cast<int>(width * done / total) : width;
    std::fprintf(stderr, "\r[%-*s] %zu/%zu  %.1f %s/s  ETA %.0f s ", width, std::string(filled, '#').c_str(),
                 done, total, rate, unit_, eta);
    if (done == total) std::fprintf(stderr, "\n");
  }

 private:
  const char* unit_;
  bool enabled_;
  std::chrono::steady_clock::time_point start_ = std::chrono::steady_clock::now();
};

}  // namespace residue::cli
