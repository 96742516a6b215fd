#include "residue/detector/demo/sample_images.hpp"

#include <algorithm>
#include <cmath>
#include <cstdlib>
#include <numbers>
#include <random>
#include <span>

namespace residue {

std::optional<std::filesystem::path> sample_photo_dir() {
  std::error_code ec;
  if (const char* env = std::getenv("RESIDUE_SAMPLE_DIR"); env != nullptr && *env != '\0') {
    if (std::filesystem::is_directory(env, ec)) return std::filesystem::path(env);
    return std::nullopt;
  }
  const std::filesystem::path debian = "/usr/lib/python3/dist-packages/skimage/data";
  if (std::filesystem::is_directory(debian, ec)) return debian;
  return std::nullopt;
}

std::vector<std::filesystem::path> sample_photos(const std::filesystem::path& dir) {
  // Photographs of real scenes; the other samples are drawings, text, charts or micrographs.
  static const char* const kPhotos[] = {"astronaut.png",       "camera.png",
                                        "chelsea.png",         "coffee.png",
                                        "motorcycle_left.png", "motorcycle_right.png",
                                        "rocket.jpg",          "hubble_deep_field.jpg",
                                        "brick.png",           "grass.png",
                                        "gravel.png",          "moon.png",
                                        "coins.png",           "clock_motion.png"};
  std::vector<std::filesystem::path> found;
  std::error_code ec;
  for (const char* name : kPhotos) {
    if (std::filesystem::is_regular_file(dir / name, ec)) found.push_back(dir / name);
  }
  return found;
}

Image simulate_decoder_output(const Image& picture, SimulatedDecoder decoder) {
  const int w = picture.width / 2;
  const int h = picture.height / 2;
  Image out = Image::zeros(2 * w, 2 * h, picture.channels);
  static const float kUneven[3][3] = {{0.3F, 0.7F, 0.2F}, {0.6F, 1.0F, 0.5F}, {0.2F, 0.6F, 0.3F}};
  for (int c = 0; c < picture.channels; ++c) {
    std::vector<float> small(static_cast<size_t>(w) * h);
    const float* src = picture.plane(c);
    for (int y = 0; y < h; ++y) {
      for (int x = 0; x < w; ++x) {
        const size_t i = static_cast<size_t>(2 * y) * picture.width + static_cast<size_t>(2 * x);
        small[static_cast<size_t>(y) * w + x] =
            0.25F * (src[i] + src[i + 1] + src[i + picture.width] + src[i + picture.width + 1]);
      }
    }
    float* dst = out.plane(c);
    if (decoder == SimulatedDecoder::kTransposedConvolution) {
      std::vector<float> weight(out.samples.size() / out.channels, 0.0F);
      for (int y = 0; y < h; ++y) {
        for (int x = 0; x < w; ++x) {
          for (int i = 0; i < 3; ++i) {
            for (int j = 0; j < 3; ++j) {
              const int oy = 2 * y + i - 1;
              const int ox = 2 * x + j - 1;
              if (oy < 0 || ox < 0 || oy >= 2 * h || ox >= 2 * w) continue;
              dst[static_cast<size_t>(oy) * 2 * w + ox] +=
                  kUneven[i][j] * small[static_cast<size_t>(y) * w + x];
            }
          }
        }
      }
      for (float& v : std::span(dst, static_cast<size_t>(4) * w * h)) v /= 1.5F;  // keep the brightness
    } else {
      std::vector<float> near(static_cast<size_t>(4) * w * h);
      for (int y = 0; y < 2 * h; ++y) {
        for (int x = 0; x < 2 * w; ++x)
          near[static_cast<size_t>(y) * 2 * w + x] = small[static_cast<size_t>(y / 2) * w + x / 2];
      }
      for (int y = 0; y < 2 * h; ++y) {
        for (int x = 0; x < 2 * w; ++x) {
          float s = 0.0F;
          for (int dy = -1; dy <= 1; ++dy) {
            for (int dx = -1; dx <= 1; ++dx) {
              const int yy = std::clamp(y + dy, 0, 2 * h - 1);
              const int xx = std::clamp(x + dx, 0, 2 * w - 1);
              s += (dy == 0 && dx == 0 ? 0.5F : 0.0625F) * near[static_cast<size_t>(yy) * 2 * w + xx];
            }
          }
          dst[static_cast<size_t>(y) * 2 * w + x] = s;
        }
      }
    }
  }
  return out;
}

Image simulated_scene(int width, int height, unsigned seed, double noise_sigma) {
  std::mt19937 rng(seed);
  std::uniform_real_distribution<double> uni(0.0, 1.0);
  std::normal_distribution<double> noise(0.0, noise_sigma);
  struct Wave {
    double fx, fy, phase, amp[3];
  };
  std::vector<Wave> waves(12);
  for (auto& w : waves) {
    const double f = 0.002 + 0.03 * std::pow(uni(rng), 2.0);  // mostly low frequencies
    const double angle = uni(rng) * std::numbers::pi;
    w = {f * std::cos(angle),
         f * std::sin(angle),
         uni(rng) * 2 * std::numbers::pi,
         {20 * uni(rng), 20 * uni(rng), 20 * uni(rng)}};
  }
  const double edge_x = width * (0.3 + 0.4 * uni(rng));
  Image image = Image::zeros(width, height, 3);
  for (int c = 0; c < 3; ++c) {
    float* p = image.plane(c);
    for (int y = 0; y < height; ++y) {
      for (int x = 0; x < width; ++x) {
        double v = 100.0 + 40.0 * c + (x + 0.3 * y > edge_x ? 30.0 : 0.0);
        for (const auto& w : waves)
          v += w.amp[c] * std::sin(2 * std::numbers::pi * (w.fx * x + w.fy * y) + w.phase);
        p[static_cast<size_t>(y) * width + x] = static_cast<float>(std::clamp(v + noise(rng), 0.0, 255.0));
      }
    }
  }
  return image;
}

}  // namespace residue
