// Analysis windows: where the fixed-size square tiles sit in an image. Never resizes.
//
// Policy (docs/architecture.md): the standard window is 256 px. An image whose shorter side is at
// least 256 gets a grid of up to 3 x 3 windows spread evenly over it (fewer where the side holds
// fewer whole windows), so large images are sampled at the centre and towards the edges. A
// smaller image (a thumbnail) is analysed with one centred window of the largest power of two
// that fits, down to the floor (64 px); below the floor it is refused. Window origins are
// rounded down to multiples of 8 so that the JPEG block grid and the 2 x 2 colour-filter lattice
// have the same phase in every window. Sizes are powers of two so that N/2, N/4 and N/8 are
// exact frequency bins.
#pragma once

#include <vector>

#include "residue/features/image.hpp"
#include "residue/features/status.hpp"

namespace residue {

struct WindowPolicy {
  int standard_size = 256;  // px, a power of two
  int min_size = 64;        // px, a power of two; smaller images are refused
  int max_per_axis = 3;     // windows per axis for large images
};

struct WindowRect {
  int x = 0;
  int y = 0;
};

struct WindowLayout {
  int size = 0;                     // px
  bool reduced = false;             // true when smaller than the standard window
  std::vector<WindowRect> origins;  // row-major order, top-left corners
};

// Plans the windows for an image of the given size, or kTooSmall.
Result<WindowLayout> plan_windows(int width, int height, const WindowPolicy& policy = {});

// Copies the planned tiles out of a decoded image.
std::vector<Tile> cut_tiles(const Image& image, const WindowLayout& layout);

}  // namespace residue
