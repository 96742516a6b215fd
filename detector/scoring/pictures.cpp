#include "residue/detector/scoring/pictures.hpp"

#include <openssl/evp.h>

#include <algorithm>
#include <cmath>
#include <cstdio>

#include "residue/features/decode.hpp"
#include "residue/features/families.hpp"
#include "residue/features/spectrum.hpp"
#include "residue/training/atomic_file.hpp"

namespace residue {

namespace {

float percentile(std::vector<float> v, double q) {
  if (v.empty()) return 0.0F;
  const auto k = static_cast<size_t>(q * static_cast<double>(v.size() - 1));
  std::nth_element(v.begin(), v.begin() + static_cast<std::ptrdiff_t>(k), v.end());
  return v[k];
}

}  // namespace

Image thumbnail(const Image& image, int max_side) {
  const int longer = std::max(image.width, image.height);
  if (longer <= max_side) return image;
  const double f = static_cast<double>(longer) / max_side;
  const int w = std::max(1, static_cast<int>(image.width / f));
  const int h = std::max(1, static_cast<int>(image.height / f));
  Image out = Image::zeros(w, h, image.channels);
  for (int c = 0; c < image.channels; ++c) {
    for (int y = 0; y < h; ++y) {
      const int y0 = static_cast<int>(y * f);
      const int y1 = std::max(y0 + 1, static_cast<int>((y + 1) * f));
      for (int x = 0; x < w; ++x) {
        const int x0 = static_cast<int>(x * f);
        const int x1 = std::max(x0 + 1, static_cast<int>((x + 1) * f));
        double sum = 0.0;
        for (int yy = y0; yy < std::min(y1, image.height); ++yy) {
          for (int xx = x0; xx < std::min(x1, image.width); ++xx) {
            sum += image.plane(c)[static_cast<size_t>(yy) * image.width + xx];
          }
        }
        out.plane(c)[static_cast<size_t>(y) * w + x] = static_cast<float>(sum / ((y1 - y0) * (x1 - x0)));
      }
    }
  }
  return out;
}

Image residual_picture(const Image& image) {
  const auto y = luma(image);
  Image out = Image::zeros(image.width, image.height, 1);
  // 3 x 3 median with replicated borders, the same denoiser as the spectral family.
  for (int r = 0; r < image.height; ++r) {
    for (int c = 0; c < image.width; ++c) {
      float v[9];
      int k = 0;
      for (int dy = -1; dy <= 1; ++dy) {
        for (int dx = -1; dx <= 1; ++dx) {
          const int rr = std::clamp(r + dy, 0, image.height - 1);
          const int cc = std::clamp(c + dx, 0, image.width - 1);
          v[k++] = y[static_cast<size_t>(rr) * image.width + cc];
        }
      }
      std::nth_element(v, v + 4, v + 9);
      out.samples[static_cast<size_t>(r) * image.width + c] =
          std::fabs(y[static_cast<size_t>(r) * image.width + c] - v[4]);
    }
  }
  const float top = std::max(1e-3F, percentile(out.samples, 0.99));
  for (float& s : out.samples) s = std::min(255.0F, 255.0F * s / top);
  return out;
}

Image spectrum_picture(const std::vector<float>& window, int n, bool mark_grid) {
  const auto power = hann_power_spectrum(window.data(), n);
  std::vector<float> logp(static_cast<size_t>(n) * n);
  for (int v = 0; v < n; ++v) {
    for (int u = 0; u < n; ++u) {
      // fftshift: frequency 0 to the centre
      const int sv = (v + n / 2) % n;
      const int su = (u + n / 2) % n;
      logp[static_cast<size_t>(sv) * n + su] =
          static_cast<float>(std::log10(power[static_cast<size_t>(v) * n + u] + 1e-12));
    }
  }
  const float lo = percentile(logp, 0.01);
  const float hi = percentile(logp, 0.999);
  Image out = Image::zeros(n, n, 3);
  for (size_t i = 0; i < logp.size(); ++i) {
    const float g = std::clamp(255.0F * (logp[i] - lo) / std::max(1e-6F, hi - lo), 0.0F, 255.0F);
    for (int c = 0; c < 3; ++c) out.plane(c)[i] = g;
  }
  if (mark_grid) {
    const int step = n / 8;
    for (int a = 0; a <= 8; ++a) {
      for (int b = 0; b <= 8; ++b) {
        if (a == 4 && b == 4) continue;  // DC
        const int cx = a * step;
        const int cy = b * step;
        for (int d = 3; d <= 5; ++d) {  // four short red ticks around the point, leaving it visible
          for (const auto& [dx, dy] :
               {std::pair{d, 0}, std::pair{-d, 0}, std::pair{0, d}, std::pair{0, -d}}) {
            const int x = cx + dx;
            const int y = cy + dy;
            if (x < 0 || y < 0 || x >= n || y >= n) continue;
            const size_t i = static_cast<size_t>(y) * n + x;
            out.plane(0)[i] = 230;
            out.plane(1)[i] = 40;
            out.plane(2)[i] = 40;
          }
        }
      }
    }
  }
  return out;
}

Image enlarge(const Image& image, int factor) {
  Image out = Image::zeros(image.width * factor, image.height * factor, image.channels);
  for (int c = 0; c < image.channels; ++c) {
    for (int y = 0; y < out.height; ++y) {
      for (int x = 0; x < out.width; ++x) {
        out.plane(c)[static_cast<size_t>(y) * out.width + x] =
            image.plane(c)[static_cast<size_t>(y / factor) * image.width + x / factor];
      }
    }
  }
  return out;
}

Image surprise_picture(const CameraPixelModel& model, const std::vector<float>& luma, int n) {
  const auto gap = surprise_map(model, luma, n);
  std::vector<float> magnitude(gap.size());
  for (size_t i = 0; i < gap.size(); ++i) magnitude[i] = std::fabs(gap[i]);
  const float top = std::max(1e-3F, percentile(magnitude, 0.99));
  Image out = Image::zeros(n, n, 3);
  for (size_t i = 0; i < gap.size(); ++i) {
    const float v = std::min(255.0F, 255.0F * std::fabs(gap[i]) / top);
    out.plane(gap[i] > 0 ? 0 : 2)[i] = v;
  }
  return out;
}

std::string png_data_uri(const Image& image) {
  auto png = encode_image(image, ImageFormat::kPng);
  if (!png) return "";
  std::string b64(4 * ((png->size() + 2) / 3) + 1, '\0');
  const int written = EVP_EncodeBlock(reinterpret_cast<unsigned char*>(b64.data()), png->data(),
                                      static_cast<int>(png->size()));
  b64.resize(static_cast<size_t>(std::max(0, written)));
  return "data:image/png;base64," + b64;
}

Result<bool> write_png(const Image& image, const std::filesystem::path& path) {
  auto png = encode_image(image, ImageFormat::kPng);
  if (!png) return png.error();
  return write_file_atomically(path, std::string(png->begin(), png->end()));
}

std::string bar_chart_svg(const std::map<std::string, double>& values, const std::string& caption) {
  double extent = 1e-9;
  for (const auto& [k, v] : values) extent = std::max(extent, std::fabs(v));
  const int row = 34;
  const int height = 40 + row * static_cast<int>(values.size());
  std::string s = "<svg xmlns='http://www.w3.org/2000/svg' width='520' height='" + std::to_string(height) +
                  "' font-family='sans-serif' font-size='13'><text x='10' y='18' font-weight='bold'>" +
                  caption + "</text><line x1='330' y1='26' x2='330' y2='" + std::to_string(height - 6) +
                  "' stroke='#444'/>";
  int y = 32;
  char buf[64];
  for (const auto& [k, v] : values) {
    const double w = 170.0 * std::fabs(v) / extent;
    const double x = v >= 0 ? 330.0 : 330.0 - w;
    std::snprintf(buf, sizeof buf, "%.1f", x);
    s += "<text x='10' y='" + std::to_string(y + 17) + "'>" + k + "</text>";
    s += std::string("<rect x='") + buf + "' y='" + std::to_string(y + 4) + "' height='20' width='" +
         std::to_string(static_cast<int>(w)) + "' fill='" + (v >= 0 ? "#c0392b" : "#1f5fa8") + "'/>";
    std::snprintf(buf, sizeof buf, "%+.2f", v);
    s += "<text x='" + std::to_string(v >= 0 ? 335 + static_cast<int>(w) : 325 - static_cast<int>(w)) +
         "' y='" + std::to_string(y + 19) + "' text-anchor='" + (v >= 0 ? "start" : "end") + "'>" + buf +
         "</text>";
    y += row;
  }
  return s + "</svg>";
}

}  // namespace residue
