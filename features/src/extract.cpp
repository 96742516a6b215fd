#include "residue/features/extract.hpp"

#include <array>
#include <chrono>
#include <cstdio>

#include "residue/features/families.hpp"
#include "residue/features/fingerprint.hpp"
#include "residue/features/surprise.hpp"
#include "residue/features/window_threads.hpp"

namespace residue {

namespace {

using Clock = std::chrono::steady_clock;

double ms_since(Clock::time_point start) {
  return std::chrono::duration<double, std::milli>(Clock::now() - start).count();
}

bool is_peak(const std::string& name) { return name.ends_with(".peak"); }

struct Family {
  std::string_view name;
  const std::vector<std::string>& (*names)();
  std::vector<double> (*window)(const WindowInput&);
  double FamilyTimings::*timing;
};

const Family kFamilies[] = {
    {"spectral", spectral_names, spectral_window, &FamilyTimings::spectral_ms},
    {"noise", noise_names, noise_window, &FamilyTimings::noise_ms},
    {"resampling", resampling_names, resampling_window, &FamilyTimings::resampling_ms},
    {"sensor", sensor_names, sensor_window, &FamilyTimings::sensor_ms},
    {"texture", texture_names, texture_window, &FamilyTimings::texture_ms},
    {"coding", coding_names, coding_window, &FamilyTimings::coding_ms},
    {"surprise", surprise_names, surprise_window, &FamilyTimings::surprise_ms},
};

struct Schema {
  std::vector<std::string> names;
  std::vector<std::string> families;
  std::string id;
};

const Schema& schema() {
  static const Schema s = [] {
    Schema out;
    for (const auto& f : kFamilies) {
      for (const auto& name : f.names()) {
        if (is_peak(name)) {
          out.names.push_back(name + ".mean");
          out.names.push_back(name + ".max");
          out.families.insert(out.families.end(), 2, std::string(f.name));
        } else {
          out.names.push_back(name);
          out.families.emplace_back(f.name);
        }
      }
    }
    // Each name is followed by a 0xFF separator so that ("ab", "c") and ("a", "bc") differ.
    std::string text(kExtractorVersion);
    text.push_back('\xFF');
    for (const auto& n : out.names) {
      text += n;
      text.push_back('\xFF');
    }
    const std::uint64_t h = fnv1a_64(text);
    char buf[17];
    std::snprintf(buf, sizeof buf, "%016llx", static_cast<unsigned long long>(h));
    out.id = buf;
    return out;
  }();
  return s;
}

}  // namespace

const std::vector<std::string>& feature_names() { return schema().names; }
const std::vector<std::string>& feature_families() { return schema().families; }
const std::string& feature_schema_id() { return schema().id; }

std::vector<WindowInput> window_inputs(const std::vector<Tile>& tiles) {
  std::vector<WindowInput> inputs;
  inputs.reserve(tiles.size());
  for (const auto& tile : tiles) inputs.emplace_back(tile, tile.luma());
  return inputs;
}

FeatureVector extract_tiles(const std::vector<Tile>& tiles, FamilyTimings* timings, double* grid_strength,
                            int threads) {
  return extract_windows(window_inputs(tiles), timings, grid_strength, threads);
}

FeatureVector extract_windows(const std::vector<WindowInput>& windows, FamilyTimings* timings,
                              double* grid_strength, int threads) {
  FamilyTimings local;
  FamilyTimings& t = timings != nullptr ? *timings : local;
  constexpr size_t kCount = std::size(kFamilies);
  // Every window's values and times, family by family, computed on whichever thread takes the
  // window (all of a window's families on one thread: they share what the window keeps), then
  // pooled here in window order, so that the vector is the same on any number of threads.
  struct WindowResult {
    std::array<std::vector<double>, kCount> values;
    std::array<double, kCount> ms{};
    double grid = 0.0;
  };
  std::vector<WindowResult> results(windows.size());
  parallel_indices(windows.size(), threads, [&](size_t w) {
    const WindowInput& input = windows[w];
    WindowResult& r = results[w];
    r.grid = block_grid_strength(input.luma.data(), input.tile.size);
    for (size_t f = 0; f < kCount; ++f) {
      const auto start = Clock::now();
      r.values[f] = kFamilies[f].window(input);
      r.ms[f] = ms_since(start);
    }
  });
  double grid = 0.0;
  for (const auto& r : results) grid += r.grid;
  if (grid_strength != nullptr)
    *grid_strength = windows.empty() ? 1.0 : grid / static_cast<double>(windows.size());

  FeatureVector out;
  out.values.reserve(feature_names().size());
  out.windows.assign(windows.size(), {});
  for (auto& w : out.windows) w.reserve(feature_names().size());
  for (size_t f = 0; f < kCount; ++f) {
    const auto& names = kFamilies[f].names();
    std::vector<double> mean(names.size(), 0.0);
    std::vector<double> max(names.size(), -1e300);
    for (size_t w = 0; w < windows.size(); ++w) {
      const auto& values = results[w].values[f];
      for (size_t i = 0; i < values.size(); ++i) {
        mean[i] += values[i] / static_cast<double>(windows.size());
        max[i] = std::max(max[i], values[i]);
        out.windows[w].push_back(values[i]);
        if (is_peak(names[i])) out.windows[w].push_back(values[i]);  // a window's mean and max are its value
      }
      t.*(kFamilies[f].timing) += results[w].ms[f];
    }
    for (size_t i = 0; i < names.size(); ++i) {
      out.values.push_back(mean[i]);
      if (is_peak(names[i])) out.values.push_back(max[i]);
    }
  }
  return out;
}

Result<Extraction> extract_bytes(std::span<const std::uint8_t> bytes, const ExtractOptions& options) {
  const auto start = Clock::now();
  auto decoded = decode_windows(bytes, options.limits, options.windows, options.skip_unused_rows);
  if (!decoded) return decoded.error();
  Extraction out;
  out.timings.decode_ms = ms_since(start);
  out.header = decoded->header;
  out.channels = decoded->channels;
  out.alpha_dropped = decoded->alpha_dropped;
  out.layout = decoded->layout;
  out.decoded_rows = decoded->decoded_rows;
  if (decoded->jpeg_tables) out.compression.jpeg = estimate_jpeg_quality(*decoded->jpeg_tables);
  const auto windows = window_inputs(decoded->tiles);
  out.features =
      extract_windows(windows, &out.timings, &out.compression.block_grid_strength, options.window_threads);
  const auto processing_start = Clock::now();
  out.processing = assess_processing(*decoded, out.compression.jpeg, &windows);
  out.timings.processing_ms = ms_since(processing_start);
  out.timings.total_ms = ms_since(start);
  return out;
}

Result<Extraction> extract_file(const std::filesystem::path& path, const ExtractOptions& options) {
  auto bytes = read_file(path, options.limits);
  if (!bytes) return bytes.error();
  return extract_bytes(*bytes, options);
}

Result<Extraction> extract_image(const Image& image, const ExtractOptions& options) {
  auto layout = plan_windows(image.width, image.height, options.windows);
  if (!layout) return layout.error();
  Extraction out;
  out.header = {ImageFormat::kUnknown, image.width, image.height, image.channels, 8};
  out.channels = image.channels;
  out.layout = *layout;
  out.decoded_rows = static_cast<std::uint64_t>(image.height);
  DecodedWindows decoded;
  decoded.header = out.header;
  decoded.channels = image.channels;
  decoded.layout = *layout;
  decoded.tiles = cut_tiles(image, *layout);
  const auto windows = window_inputs(decoded.tiles);
  out.features =
      extract_windows(windows, &out.timings, &out.compression.block_grid_strength, options.window_threads);
  const auto processing_start = Clock::now();
  out.processing = assess_processing(decoded, std::nullopt, &windows);
  out.timings.processing_ms = ms_since(processing_start);
  out.timings.total_ms = out.timings.spectral_ms + out.timings.noise_ms + out.timings.resampling_ms +
                         out.timings.sensor_ms + out.timings.texture_ms + out.timings.coding_ms +
                         out.timings.surprise_ms + out.timings.processing_ms;
  return out;
}

}  // namespace residue
