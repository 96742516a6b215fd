// Evidence of everyday processing (processing.hpp): colour quantisation, resampling, JPEG history,
// flat colour areas.
#include "residue/features/processing.hpp"

#include <algorithm>
#include <bit>
#include <cmath>
#include <cstring>
#include <numbers>
#include <numeric>

#include "residue/features/families.hpp"
#include "residue/features/filters.hpp"
#include "residue/features/spectrum.hpp"
#include "residue/features/vector_clones.hpp"

namespace residue {

namespace {

// Decision values. Each was set on images the tests make from scikit-image's photographs
// (tests/features/test_processing.cpp) and checked on the development set's camera originals
// (docs/quality.md); none comes from a paper.
constexpr double kResamplingStrength = 0.75;          // median log10 peak ratio of agreeing windows
constexpr double kResamplingStrengthSingle = 1.0;     // the same for a single (thumbnail) window
constexpr double kResamplingStrengthUnanimous = 0.5;  // when all of three or more windows agree
constexpr double kMinResamplingFrequency = 0.08;      // below, scene content dominates the p-map
constexpr double kDoubleJpegDips = 0.25;              // median share of dipped levels over modes
constexpr double kCombedGaps = 0.2;                   // share of empty levels: a combed histogram
constexpr double kScreenshotFlatShare = 0.25;         // share of exactly flat 4 x 4 blocks
constexpr std::uint32_t kPaletteColours = 256;
constexpr std::uint32_t kScreenshotColours = 4096;

// std::clamp(std::lround(v), 0, 255), with the clamp first so that the rounding stays in int range.
std::uint8_t level(float v) {
  return static_cast<std::uint8_t>(round_half_away(std::clamp(v, 0.0F, 255.0F)));
}

// The 8-bit levels of each channel of a tile, as level() gives them. Eight at a time in GCC's
// vector extension: the compiler does not vectorise level()'s float -> int -> byte conversion
// itself, and this loop was 4 % of extraction (three conversions per pixel per window). For
// v in [0, 255] rounding half away from zero is truncation plus one when the fraction, exact in
// float arithmetic, is at least one half: the same bytes as level().
RESIDUE_VECTOR_CLONES void tile_levels(const Tile& t, std::vector<std::uint8_t>& out) {
  using Floats = float __attribute__((vector_size(32)));
  using Ints = int __attribute__((vector_size(32)));
  using Bytes = std::uint8_t __attribute__((vector_size(8)));
  const size_t count = static_cast<size_t>(t.channels) * t.size * t.size;
  out.resize(count);
  const float* v = t.samples.data();
  const Floats zero{};
  const Floats top = zero + 255.0F;
  const Floats half = zero + 0.5F;
  size_t i = 0;
  for (; i + 8 <= count; i += 8) {
    Floats x;
    std::memcpy(&x, v + i, sizeof x);
    x = x < zero ? zero : x;
    x = x > top ? top : x;
    Ints k = __builtin_convertvector(x, Ints);
    const Floats fraction = x - __builtin_convertvector(k, Floats);
    k += fraction >= half ? 1 : 0;
    const Bytes b = __builtin_convertvector(k, Bytes);
    std::memcpy(out.data() + i, &b, sizeof b);
  }
  for (; i < count; ++i) out[i] = level(v[i]);
}

void assess_colours(const std::vector<Tile>& tiles, ProcessingEvidence& e) {
  std::vector<std::uint64_t> seen((1U << 24) / 64, 0);
  std::array<std::array<std::uint64_t, 256>, 3> histogram{};
  std::uint64_t flat = 0, blocks = 0;
  bool channels_equal = true;  // a grey picture stored as RGB
  std::vector<std::uint8_t> levels;
  for (const auto& t : tiles) {
    const size_t plane = static_cast<size_t>(t.size) * t.size;
    tile_levels(t, levels);
    const std::uint8_t* l[3] = {levels.data(), levels.data() + (t.channels > 1 ? plane : 0),
                                levels.data() + (t.channels > 2 ? 2 * plane : 0)};
    for (size_t i = 0; i < plane && channels_equal && t.channels == 3; ++i) {
      channels_equal = l[0][i] == l[1][i] && l[1][i] == l[2][i];
    }
    const int channels = std::min(t.channels, 3);
    for (size_t i = 0; i < plane; ++i) {
      std::uint32_t colour = 0;
      for (int c = 0; c < channels; ++c) {
        const std::uint8_t v = l[c][i];
        histogram[static_cast<size_t>(c)][v] += 1;
        colour = (colour << 8) | v;
      }
      std::uint64_t& word = seen[colour >> 6];
      const std::uint64_t bit = std::uint64_t{1} << (colour & 63);
      e.distinct_colours += (word & bit) == 0 ? 1U : 0U;
      word |= bit;
    }
    e.analysed_pixels += plane;
    // Exact-colour flat 4 x 4 blocks: rare in photographs and generator output (noise and
    // dithering), common in user-interface pixels. Clipped black or white does not count.
    for (int by = 0; by + 4 <= t.size; by += 4) {
      for (int bx = 0; bx + 4 <= t.size; bx += 4) {
        ++blocks;
        bool same = true;
        bool clipped = true;
        for (int c = 0; c < t.channels && same; ++c) {
          const float* p = t.plane(c);
          const float v0 = p[static_cast<size_t>(by) * t.size + bx];
          clipped = clipped && (level(v0) == 0 || level(v0) == 255);
          for (int y = by; y < by + 4 && same; ++y) {
            for (int x = bx; x < bx + 4; ++x) same = same && p[static_cast<size_t>(y) * t.size + x] == v0;
          }
        }
        if (same && !clipped) ++flat;
      }
    }
  }
  e.grey_in_colour = channels_equal && !tiles.empty() && tiles.front().channels == 3;
  e.flat_share = blocks > 0 ? static_cast<double>(flat) / static_cast<double>(blocks) : 0.0;
  const int channels = tiles.empty() ? 0 : tiles.front().channels;
  for (int c = 0; c < channels; ++c) {
    const auto& h = histogram[static_cast<size_t>(c)];
    std::uint64_t total = 0;
    for (auto n : h) total += n;
    std::uint64_t below = 0;
    int lo = 0, hi = 255;
    for (int v = 0; v < 256; ++v) {
      below += h[static_cast<size_t>(v)];
      if (below * 100 <= total) lo = v + 1;
      if (below * 100 < total * 99) hi = v + 1;
    }
    hi = std::min(hi, 255);
    if (hi - lo < 16) continue;  // too narrow a range to judge
    int empty = 0;
    for (int v = lo; v <= hi; ++v) empty += h[static_cast<size_t>(v)] == 0 ? 1 : 0;
    e.histogram_gaps = std::max(e.histogram_gaps, static_cast<double>(empty) / (hi - lo + 1));
  }
}

// The strongest p-map peak of one window, leaving out the multiples of 1/8 cycles/pixel where
// JPEG's (and lossy WebP's) block grid puts its own periodicity.
SpectralPeak window_resampling_peak(const WindowInput& window, bool skip_block_grid) {
  const int n = window.tile.size;
  const auto& whole = window.pmap_profile();
  const int k_min = std::max(1, static_cast<int>(std::ceil(kMinResamplingFrequency * n)));
  const std::vector<double> profile(whole.begin() + k_min, whole.end());
  std::vector<int> bins(profile.size());
  std::iota(bins.begin(), bins.end(), k_min);
  std::vector<double> sorted = profile;
  std::nth_element(sorted.begin(), sorted.begin() + static_cast<std::ptrdiff_t>(sorted.size() / 2),
                   sorted.end());
  const double median = sorted[sorted.size() / 2];
  const int eighth = n / 8;
  SpectralPeak best{0.0, 0.0};
  for (size_t i = 0; i < profile.size(); ++i) {
    const int k = bins[i];
    const int to_grid = std::min(k % eighth, eighth - k % eighth);
    if (skip_block_grid && to_grid <= 1) continue;
    if (k == k_min) continue;  // a maximum at the band's lower edge is the scene's falling spectrum
    const double ratio = (profile[i] + 1e-12) / (median + 1e-12);
    if (ratio > best.ratio) best = {ratio, static_cast<double>(k) / n};
  }
  return best;
}

ResamplingTrace assess_resampling(const std::vector<WindowInput>& windows, bool skip_block_grid) {
  ResamplingTrace r;
  std::vector<SpectralPeak> peaks;
  peaks.reserve(windows.size());
  for (const auto& w : windows) peaks.push_back(window_resampling_peak(w, skip_block_grid));
  r.windows = static_cast<int>(peaks.size());
  if (peaks.empty()) return r;
  const double tolerance = 1.5 / windows.front().tile.size;  // bins
  for (const auto& candidate : peaks) {
    std::vector<double> strengths;
    for (const auto& p : peaks) {
      if (std::fabs(p.frequency - candidate.frequency) <= tolerance) strengths.push_back(std::log10(p.ratio));
    }
    if (static_cast<int>(strengths.size()) <= r.windows_agreeing) continue;
    std::sort(strengths.begin(), strengths.end());
    r.windows_agreeing = static_cast<int>(strengths.size());
    r.strength = strengths[strengths.size() / 2];
    r.frequency = candidate.frequency;
  }
  const int needed = r.windows == 1 ? 1 : std::max(2, (3 * r.windows + 4) / 5);  // 60 %, at least two
  const double floor = r.windows == 1 ? kResamplingStrengthSingle : kResamplingStrength;
  // Every one of three or more windows peaking at the same frequency is itself strong evidence
  // (scene peaks fall at random frequencies), so a weaker peak suffices there.
  const bool unanimous = r.windows >= 3 && r.windows_agreeing == r.windows;
  r.detected = r.frequency > 0 && r.windows_agreeing >= needed &&
               (r.strength >= floor || (unanimous && r.strength >= kResamplingStrengthUnanimous));
  return r;
}

DoubleJpegTrace assess_double_jpeg(const std::vector<WindowInput>& windows, const JpegQuantTables& tables) {
  // Low-frequency AC modes (row, column), where most coefficients are non-zero.
  constexpr int kModes[][2] = {{0, 1}, {1, 0}, {1, 1}, {0, 2}, {2, 0}, {1, 2}, {2, 1}, {2, 2}};
  constexpr int kRange = 24;
  // A quantiser step of 0 breaks the standard (ITU-T T.81 B.2.4.1: 1..255) but libjpeg accepts it
  // from a damaged table: nothing can be said of such a file's history.
  for (const auto& mode : kModes) {
    if (tables.luma[static_cast<size_t>(mode[0]) * 8 + static_cast<size_t>(mode[1])] <= 0) return {};
  }
  std::vector<std::vector<double>> histograms(std::size(kModes), std::vector<double>(kRange + 1, 0.0));
  for (const auto& w : windows) {
    const Tile& t = w.tile;
    const auto& luma = w.luma;
    for (int by = 0; by + 8 <= t.size; by += 8) {
      for (int bx = 0; bx + 8 <= t.size; bx += 8) {
        std::array<double, 64> block{};
        for (size_t y = 0; y < 8; ++y) {
          const float* row = luma.data() + (static_cast<size_t>(by) + y) * static_cast<size_t>(t.size) + bx;
          for (size_t x = 0; x < 8; ++x) block[y * 8 + x] = row[x] - 128.0;
        }
        const auto d = dct8x8(block);
        for (size_t m = 0; m < std::size(kModes); ++m) {
          const int k = kModes[m][0] * 8 + kModes[m][1];
          const long v =
              std::lround(std::fabs(d[static_cast<size_t>(k)]) / tables.luma[static_cast<size_t>(k)]);
          if (v >= 0 && v <= kRange) histograms[m][static_cast<size_t>(v)] += 1.0;
        }
      }
    }
  }
  DoubleJpegTrace out;
  std::vector<double> scores;
  for (const auto& h : histograms) {
    const std::vector<double> levels(h.begin() + 1, h.end());  // |v| >= 1: level 0 is a peak of its own
    double mass = 0.0;
    for (double c : levels) mass += c;
    if (mass < 500.0) continue;
    scores.push_back(histogram_dips(levels));
  }
  out.modes_tested = static_cast<int>(scores.size());
  if (scores.size() >= 3) {
    std::sort(scores.begin(), scores.end());
    out.strength = scores[scores.size() / 2];
    out.detected = out.strength >= kDoubleJpegDips;
  }
  return out;
}

std::string fixed(double v, int digits) {
  char buf[32];
  std::snprintf(buf, sizeof buf, "%.*f", digits, v);
  return buf;
}

}  // namespace

double fine_detail(const float* luma, int width, int height) {
  if (width < 3 || height < 3) return 0.0;
  return immerkaer_sigma(luma, width, height);
}

std::vector<double> resampling_factor_candidates(double f) {
  if (!(f > 0.0 && f <= 0.5)) return {};
  std::vector<double> out = {1.0 / (1.0 - f), 1.0 / f, 1.0 / (1.0 + f), 1.0 / (2.0 - f)};
  return out;
}

std::array<double, 64> dct8x8(const std::array<double, 64>& block) {
  static const std::array<double, 64> basis = [] {
    std::array<double, 64> c{};
    for (size_t u = 0; u < 8; ++u) {
      const double scale = u == 0 ? std::sqrt(1.0 / 8.0) : std::sqrt(2.0 / 8.0);
      for (size_t x = 0; x < 8; ++x)
        c[u * 8 + x] = scale * std::cos(static_cast<double>((2 * x + 1) * u) * std::numbers::pi / 16.0);
    }
    return c;
  }();
  std::array<double, 64> rows{}, out{};
  for (size_t y = 0; y < 8; ++y) {
    for (size_t u = 0; u < 8; ++u) {
      double s = 0.0;
      for (size_t x = 0; x < 8; ++x) s += basis[u * 8 + x] * block[y * 8 + x];
      rows[y * 8 + u] = s;
    }
  }
  for (size_t v = 0; v < 8; ++v) {
    for (size_t u = 0; u < 8; ++u) {
      double s = 0.0;
      for (size_t y = 0; y < 8; ++y) s += basis[v * 8 + y] * rows[y * 8 + u];
      out[v * 8 + u] = s;
    }
  }
  return out;
}

double histogram_dips(const std::vector<double>& h) {
  const int n = static_cast<int>(h.size());
  int judged = 0, dips = 0;
  for (int i = 0; i < n; ++i) {
    double s = 0.0;
    int count = 0;
    for (int j = std::max(0, i - 2); j <= std::min(n - 1, i + 2); ++j, ++count)
      s += h[static_cast<size_t>(j)];
    const double average = s / count;
    if (average < 20.0) continue;  // too few coefficients around to judge this level
    ++judged;
    dips += h[static_cast<size_t>(i)] < 0.2 * average ? 1 : 0;
  }
  return judged >= 6 ? static_cast<double>(dips) / judged : 0.0;
}

ProcessingEvidence assess_processing(const DecodedWindows& decoded,
                                     const std::optional<QualityEstimate>& jpeg,
                                     const std::vector<WindowInput>* windows) {
  std::vector<WindowInput> made;
  if (windows == nullptr) {
    made = window_inputs(decoded.tiles);
    windows = &made;
  }
  ProcessingEvidence e;
  e.palette_file = decoded.header.palette;
  assess_colours(decoded.tiles, e);
  // A grey image has at most 256 levels anyway: there only a palette file or a combed histogram
  // tells quantisation.
  const bool colour = !decoded.tiles.empty() && decoded.tiles.front().channels == 3 && !e.grey_in_colour;
  e.quantised = e.palette_file || (colour ? e.distinct_colours <= kPaletteColours && e.analysed_pixels >= 4096
                                          : e.histogram_gaps >= kCombedGaps);
  if (e.quantised) {
    e.notes.push_back(e.palette_file
                          ? "palette image (colour indices, " + std::to_string(e.distinct_colours) +
                                " colours in the analysed windows)"
                          : "only " + std::to_string(e.distinct_colours) +
                                " distinct colours: quantised to a palette");
  } else if (e.histogram_gaps >= kCombedGaps) {
    e.notes.push_back("combed histogram (" + fixed(100 * e.histogram_gaps, 0) +
                      " % of levels empty): levels stretched or bit depth reduced");
  }
  const bool jpeg_file = decoded.header.format == ImageFormat::kJpeg;
  e.lossy_webp = decoded.header.format == ImageFormat::kWebp && decoded.header.lossy;
  // JPEG's 8 x 8 and lossy WebP's 4 x 4 transform blocks (in 16 x 16 macroblocks) put periodic
  // energy at multiples of 1/8 cycles/pixel into the p-map: not resampling.
  e.resampling = assess_resampling(*windows, jpeg_file || e.lossy_webp);
  if (e.resampling.detected) {
    const auto f = resampling_factor_candidates(e.resampling.frequency);
    e.notes.push_back("resampled: periodic interpolation trace at " + fixed(e.resampling.frequency, 3) +
                      " cycles/pixel in " + std::to_string(e.resampling.windows_agreeing) + " of " +
                      std::to_string(e.resampling.windows) + " windows (scaled by about " + fixed(f[0], 2) +
                      ", " + fixed(f[2], 2) + " or " + fixed(f[1], 2) + ")");
  }
  if (jpeg) {
    e.jpeg_quality = jpeg->quality;
    e.notes.push_back("JPEG quality about " + std::to_string(jpeg->quality) +
                      (jpeg->exact ? " (standard tables)" : " (non-standard tables)"));
  }
  if (decoded.jpeg_tables && jpeg_file) {
    e.double_jpeg = assess_double_jpeg(*windows, *decoded.jpeg_tables);
    if (e.double_jpeg.detected)
      e.notes.emplace_back("compressed as JPEG at least twice (periodic DCT histograms)");
  }
  if (e.lossy_webp) e.notes.emplace_back("lossy WebP");
  // Flat colour alone is not enough: JPEG turns smooth studio backgrounds into exactly flat blocks
  // too. User-interface pixels are flat, losslessly stored and made of few colours.
  e.screenshot_like = e.flat_share >= kScreenshotFlatShare && !decoded.header.lossy &&
                      e.distinct_colours <= kScreenshotColours;
  if (e.screenshot_like) {
    e.notes.push_back(fixed(100 * e.flat_share, 0) +
                      " % of the picture is exact flat colour: screenshot or graphics-like");
  }
  std::vector<double> detail;
  detail.reserve(windows->size());
  // fine_detail() of each window's luma, which is the Immerkaer sigma the noise family keeps in the
  // window (windows are at least 32 px, so fine_detail's guard for tiny planes never applies).
  for (const auto& w : *windows) detail.push_back(w.luma_noise_sigma());
  if (!detail.empty()) {
    std::nth_element(detail.begin(), detail.begin() + static_cast<std::ptrdiff_t>(detail.size() / 2),
                     detail.end());
    e.fine_detail = detail[detail.size() / 2];
  }
  e.decoder_warnings = decoded.decoder_warnings;
  e.damaged = damaged(e.decoder_warnings);
  for (const auto& w : e.decoder_warnings) {
    e.notes.push_back((w.kind == "damaged" ? "the file is damaged: " : "decoder note: ") + w.message);
  }
  return e;
}

}  // namespace residue
