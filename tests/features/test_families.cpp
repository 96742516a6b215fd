// The trace families on images with known history: upsampling (spectral peaks), resampling
// (p-map), demosaicing (CFA), against the frequencies theory predicts.
#include <doctest/doctest.h>

#include <algorithm>
#include <cmath>
#include <sstream>

#include "residue/features/extract.hpp"
#include "residue/features/families.hpp"
#include "residue/features/spectrum.hpp"
#include "support.hpp"

using namespace residue;

namespace {

// Grey 256 x 256 crop of scikit-image's coffee photograph (no resampling traces of its own).
Image coffee_crop(int size) {
  return test::grey_of(crop(test::load(test::sample("coffee.png")), 100, 60, size, size));
}

Image upsample_nearest(const Image& in, int f) {
  Image out = Image::zeros(in.width * f, in.height * f, 1);
  for (int y = 0; y < out.height; ++y) {
    for (int x = 0; x < out.width; ++x)
      out.samples[y * out.width + x] = in.samples[(y / f) * in.width + x / f];
  }
  return out;
}

// Half-pixel-centred bilinear interpolation with clamped edges (as OpenCV INTER_LINEAR, or
// align_corners=False in neural-network upsampling layers).
Image upsample_bilinear(const Image& in, int f) {
  Image out = Image::zeros(in.width * f, in.height * f, 1);
  auto at = [&](int y, int x) {
    return in.samples[std::clamp(y, 0, in.height - 1) * in.width + std::clamp(x, 0, in.width - 1)];
  };
  for (int y = 0; y < out.height; ++y) {
    const double sy = (y + 0.5) / f - 0.5;
    const int y0 = static_cast<int>(std::floor(sy));
    const double wy = sy - y0;
    for (int x = 0; x < out.width; ++x) {
      const double sx = (x + 0.5) / f - 0.5;
      const int x0 = static_cast<int>(std::floor(sx));
      const double wx = sx - x0;
      out.samples[y * out.width + x] =
          static_cast<float>((1 - wy) * ((1 - wx) * at(y0, x0) + wx * at(y0, x0 + 1)) +
                             wy * ((1 - wx) * at(y0 + 1, x0) + wx * at(y0 + 1, x0 + 1)));
    }
  }
  return out;
}

// One stride-2 transposed convolution with an uneven 3 x 3 kernel: the overlap pattern leaves the
// checkerboard of Odena, Dumoulin & Olah (2016). Applied k times for 2^k.
Image upsample_transposed(Image in, int f) {
  static const double k[3][3] = {{0.3, 0.7, 0.2}, {0.6, 1.0, 0.5}, {0.2, 0.6, 0.3}};
  for (; f > 1; f /= 2) {
    Image out = Image::zeros(in.width * 2, in.height * 2, 1);
    for (int y = 0; y < in.height; ++y) {
      for (int x = 0; x < in.width; ++x) {
        for (int i = 0; i < 3; ++i) {
          for (int j = 0; j < 3; ++j) {
            const int oy = 2 * y + i - 1;
            const int ox = 2 * x + j - 1;
            if (oy < 0 || ox < 0 || oy >= out.height || ox >= out.width) continue;
            out.samples[oy * out.width + ox] += static_cast<float>(k[i][j] * in.samples[y * in.width + x]);
          }
        }
      }
    }
    in = std::move(out);
  }
  return in;
}

double value(const Extraction& e, const std::string& name) {
  const auto& names = feature_names();
  const auto it = std::find(names.begin(), names.end(), name);
  REQUIRE(it != names.end());
  return e.features.values[static_cast<size_t>(it - names.begin())];
}

// Strongest grid peak of period p (axis or diagonal, max over windows), log10 ratio.
double grid_peak(const Extraction& e, int p) {
  const std::string g = "spectral.grid_n" + std::to_string(p);
  return std::max(value(e, g + ".axis.peak.max"), value(e, g + ".diagonal.peak.max"));
}

Extraction extract(const Image& image) {
  auto e = extract_image(image);
  REQUIRE(e.ok());
  return std::move(e).value();
}

}  // namespace

TEST_CASE("upsampling by 2, 4, 8 leaves spectral peaks at N/2, N/4, N/8; the original has none") {
  // Theory: an image upsampled by f is periodic with period f in its local statistics, so the
  // spectrum of its residual magnitude has peaks at multiples of N/f (Corvi et al. 2023 show the
  // same grid for diffusion decoders). Thresholds are log10 peak-to-background ratios: above
  // 0.6 (4x) counts as a peak, below 0.35 (2.2x) as none; chosen between the two populations.
  const Extraction original = extract(coffee_crop(256));
  for (int p : {2, 4, 8}) {
    CAPTURE(p);
    CHECK(grid_peak(original, p) < 0.35);
  }
  using Upsampler = Image (*)(const Image&, int);
  const std::pair<const char*, Upsampler> methods[] = {
      {"nearest", upsample_nearest},
      {"bilinear", upsample_bilinear},
      {"transposed convolution", [](const Image& in, int f) { return upsample_transposed(in, f); }}};
  for (const auto& [method, up] : methods) {
    for (int f : {2, 4, 8}) {
      CAPTURE(method);
      CAPTURE(f);
      const Extraction e = extract(up(coffee_crop(512 / f), f));  // 512 x 512 after upsampling
      CHECK(grid_peak(e, f) > 0.6);
      for (int finer = f * 2; finer <= 8; finer *= 2) {
        CAPTURE(finer);
        CHECK(grid_peak(e, finer) < 0.35);  // no period the upsampling did not make
      }
    }
  }
}

TEST_CASE("p-map spectrum peaks where Kirchner's relation predicts for upscaling by 1.1 .. 2") {
  // Kirchner (2008), Sec. 3, and Popescu & Farid (2005): upscaling by omega makes the linear
  // prediction error periodic, with the spectral peak at f = 1/omega folded into [0, 1/2]
  // (1.1 -> 1/11, 1.25 -> 1/5, 1.5 -> 1/3, 2 -> 1/2 cycles/pixel). Relation from memory.
  // Resampling is done by scipy.ndimage.map_coordinates (bilinear, sample 0 kept), the model
  // those papers analyse. (A half-pixel-centred 2x bilinear upscale weights every output sample
  // 3:1 alike and leaves no period-2 p-map trace; docs/features.md lists that blind spot.)
  const auto window_peak = [](const std::vector<float>& image, int width, int height) {
    const int n = 256;
    std::vector<float> window(static_cast<size_t>(n) * n);
    const int x0 = (width - n) / 2;
    const int y0 = (height - n) / 2;
    for (int y = 0; y < n; ++y) {
      for (int x = 0; x < n; ++x) window[y * n + x] = image[static_cast<size_t>(y0 + y) * width + x0 + x];
    }
    const auto p = centred_kirchner_pmap(window.data(), n);
    return projected_peak(hann_power_spectrum(p.data(), n), n, 0.05);
  };
  const auto original = coffee_crop(256);
  const SpectralPeak none = window_peak(original.samples, 256, 256);
  for (double omega : {1.1, 1.25, 1.5, 2.0}) {
    CAPTURE(omega);
    const auto path = test::scratch() / "rescaled.f32";
    std::istringstream dims(test::python("rescale.py", {std::to_string(omega), path.string()}));
    int h = 0;
    int w = 0;
    dims >> h >> w;
    const SpectralPeak peak = window_peak(test::read_floats(path), w, h);
    double predicted = 1.0 / omega;
    predicted = std::min(predicted - std::floor(predicted), 1.0 - (predicted - std::floor(predicted)));
    CHECK(std::fabs(peak.frequency - predicted) <= 1.5 / 256);  // within 1.5 frequency bins
    CHECK(peak.ratio > 3.0 * none.ratio);
  }
  CHECK(none.ratio < 10.0);
}

TEST_CASE(
    "the p-map is exp(-e^2) of Kirchner's (2008) preset-predictor residual, also where expf underflows") {
  // IEEE 754 round-to-nearest: e^-104 = 6.8e-46 is under half the smallest denormal, so 0.
  CHECK(std::exp(-104.0F) == 0.0F);
  CHECK(std::exp(-103.0F) > 0.0F);
  for (float x = 104.0F; x < 1e7F; x *= 1.37F) CHECK(std::exp(-x) == 0.0F);
  // Coffee with a hard checkerboard laid over half of it: residuals from 0 to over 100.
  const int n = 64;
  Image image = coffee_crop(n);
  for (int y = 0; y < n; ++y) {
    for (int x = n / 2; x < n; ++x)
      image.plane(0)[y * n + x] = static_cast<float>((x / 2 + y / 3) % 2) * 255.0F;
  }
  const auto p = kirchner_pmap(image.plane(0), n);
  // Kirchner's preset predictor as its two groups of taps, the four neighbours (weight 1/2) and the
  // four diagonals (weight -1/4), borders replicated; each group summed in the listed order, the
  // order the float result depends on.
  constexpr int kNeighbours[4][2] = {{-1, 0}, {1, 0}, {0, -1}, {0, 1}};
  constexpr int kDiagonals[4][2] = {{-1, -1}, {-1, 1}, {1, -1}, {1, 1}};
  auto at = [&](int y, int x) {
    return image.plane(0)[std::clamp(y, 0, n - 1) * n + std::clamp(x, 0, n - 1)];
  };
  auto group = [&](const int(&taps)[4][2], int y, int x) {
    float sum = at(y + taps[0][0], x + taps[0][1]);
    for (int k = 1; k < 4; ++k) sum += at(y + taps[k][0], x + taps[k][1]);
    return sum;
  };
  int underflowed = 0;
  for (int y = 0; y < n; ++y) {
    for (int x = 0; x < n; ++x) {
      const float predicted = 0.5F * group(kNeighbours, y, x) - 0.25F * group(kDiagonals, y, x);
      const float e = at(y, x) - predicted;
      underflowed += e * e >= 104.0F ? 1 : 0;
      REQUIRE(p[static_cast<size_t>(y) * n + x] == std::exp(-e * e));
    }
  }
  CHECK(underflowed > 100);
}

TEST_CASE("Bayer mosaic + bilinear demosaicing raises the green lattice contrast; none without") {
  // Popescu & Farid (2005): CFA interpolation makes interpolated samples exact linear
  // combinations of their neighbours. With bilinear demosaicing of an RGGB mosaic, green at red
  // and blue sites is the mean of its four neighbours, so the 4-neighbour residual vanishes on
  // half of the 2 x 2 lattice.
  const Image photo = crop(test::load(test::sample("astronaut.png")), 128, 128, 256, 256);
  Image demosaiced = photo;
  const int n = 256;
  auto at = [&](int c, int y, int x) {
    return photo.plane(c)[std::clamp(y, 0, n - 1) * n + std::clamp(x, 0, n - 1)];
  };
  auto sampled = [](int c, int y, int x) {  // RGGB: R at (even, even), B at (odd, odd)
    if (c == 0) return y % 2 == 0 && x % 2 == 0;
    if (c == 2) return y % 2 == 1 && x % 2 == 1;
    return (y + x) % 2 == 1;
  };
  for (int c = 0; c < 3; ++c) {
    for (int y = 0; y < n; ++y) {
      for (int x = 0; x < n; ++x) {
        if (sampled(c, y, x)) continue;
        double sum = 0;
        int count = 0;
        for (int dy = -1; dy <= 1; ++dy) {
          for (int dx = -1; dx <= 1; ++dx) {
            const int yy = y + dy;
            const int xx = x + dx;
            if ((dy == 0 && dx == 0) || yy < 0 || xx < 0 || yy >= n || xx >= n || !sampled(c, yy, xx))
              continue;
            if (c == 1 && dy != 0 && dx != 0) continue;  // green: the four edge neighbours
            sum += at(c, yy, xx);
            ++count;
          }
        }
        demosaiced.plane(c)[y * n + x] = static_cast<float>(sum / count);
      }
    }
  }
  Tile before{0, 0, n, 3, photo.samples};
  Tile after{0, 0, n, 3, demosaiced.samples};
  const CfaTraces plain = cfa_traces(before);
  const CfaTraces mosaic = cfa_traces(after);
  CHECK(plain.lattice_contrast[1] < 0.2);
  CHECK(mosaic.lattice_contrast[1] > 2.0);
  CHECK(mosaic.lattice_contrast[0] > plain.lattice_contrast[0] + 0.3);
  CHECK(mosaic.lattice_contrast[2] > plain.lattice_contrast[2] + 0.3);
}

TEST_CASE("the vector has a stable schema with one value per name") {
  const Extraction e = extract(coffee_crop(256));
  CHECK(e.features.values.size() == feature_names().size());
  CHECK(feature_families().size() == feature_names().size());
  CHECK(feature_schema_id().size() == 16);
  for (double v : e.features.values) CHECK(std::isfinite(v));
}
