#include "residue/detector/sample_images.hpp"

#include <algorithm>
#include <cmath>
#include <cstdlib>
#include <numbers>
#include <random>

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
  static const char* const kPhotos[] = {"astronaut.png",
                                        "camera.png",
                                        "chelsea.png",
                                        "coffee.png",
                                        "motorcycle_left.png",
                                        "motorcycle_right.png",
                                        "rocket.jpg",
                                        "hubble_deep_field.jpg",
                                        "brick.png",
                                        "grass.png",
                                        "gravel.png",
                                        "moon.png",
                                        "coins.png",
                                        "clock_motion.png",
                                        "horse.png"};
  std::vector<std::filesystem::path> found;
  std::error_code ec;
  for (const char* name : kPhotos) {
    if (std::filesystem::is_regular_file(dir / name, ec)) found.push_back(dir / name);
  }
  return found;
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
