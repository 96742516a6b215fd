#include "residue/features/windows.hpp"

#include <algorithm>
#include <cmath>
#include <cstring>
#include <string>

namespace residue {

namespace {

int largest_power_of_two_at_most(int n) {
  int p = 1;
  while (p * 2 <= n) p *= 2;
  return p;
}

// Origins of `count` windows of `size` spread evenly over `extent`, rounded down to multiples of 8.
std::vector<int> spread(int extent, int size, int count) {
  std::vector<int> origins;
  if (count == 1) {
    origins.push_back(((extent - size) / 2) / 8 * 8);
    return origins;
  }
  const double step = static_cast<double>(extent - size) / (count - 1);
  for (int i = 0; i < count; ++i) {
    origins.push_back(static_cast<int>(std::lround(i * step)) / 8 * 8);
  }
  return origins;
}

}  // namespace

Result<WindowLayout> plan_windows(int width, int height, const WindowPolicy& policy) {
  const int shorter = std::min(width, height);
  if (shorter < policy.min_size) {
    return make_error(ErrorCode::kTooSmall, "image is " + std::to_string(width) + "x" +
                                                std::to_string(height) +
                                                " px; the smallest analysis window is " +
                                                std::to_string(policy.min_size) + " px square");
  }
  WindowLayout layout;
  if (shorter >= policy.standard_size) {
    layout.size = policy.standard_size;
  } else {
    layout.size = std::max(policy.min_size, largest_power_of_two_at_most(shorter));
    layout.reduced = true;
  }
  const int nx = std::clamp(width / layout.size, 1, policy.max_per_axis);
  const int ny = std::clamp(height / layout.size, 1, policy.max_per_axis);
  const auto xs = spread(width, layout.size, nx);
  const auto ys = spread(height, layout.size, ny);
  for (int y : ys) {
    for (int x : xs) layout.origins.push_back({x, y});
  }
  return layout;
}

std::vector<Tile> cut_tiles(const Image& image, const WindowLayout& layout) {
  std::vector<Tile> tiles;
  tiles.reserve(layout.origins.size());
  const int n = layout.size;
  for (const auto& o : layout.origins) {
    Tile tile{o.x, o.y, n, image.channels, std::vector<float>(static_cast<size_t>(image.channels) * n * n)};
    for (int c = 0; c < image.channels; ++c) {
      const float* src = image.plane(c);
      float* dst = tile.plane(c);
      for (int r = 0; r < n; ++r) {
        std::memcpy(dst + static_cast<size_t>(r) * n, src + static_cast<size_t>(o.y + r) * image.width + o.x,
                    sizeof(float) * n);
      }
    }
    tiles.push_back(std::move(tile));
  }
  return tiles;
}

}  // namespace residue
