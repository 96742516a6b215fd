// Open sample photographs that a Debian package ships (scikit-image's, python3-skimage), used by
// the demo and the benchmark. Public domain / CC0 photographs; see docs/demo.md.
#pragma once

#include <filesystem>
#include <optional>
#include <vector>

#include "residue/features/image.hpp"

namespace residue {

// The folder holding scikit-image's sample images: $RESIDUE_SAMPLE_DIR if set, else the Debian
// location; nullopt when neither exists.
std::optional<std::filesystem::path> sample_photo_dir();

// The camera photographs among those samples (not the drawings, charts or microscopy).
std::vector<std::filesystem::path> sample_photos(const std::filesystem::path& dir);

// A simulated scene (labelled as such wherever used): smooth random colour structure with edges
// and Gaussian sensor-like noise of standard deviation `noise_sigma`. Deterministic for a seed.
// Stands in for photographs where only speed matters (the benchmark).
Image simulated_scene(int width, int height, unsigned seed, double noise_sigma = 2.0);


// SIMULATED generator output for the demo (labelled as such wherever it is used): the picture is
// reduced 2x by box averaging (erasing the camera's own traces), then enlarged 2x the way image
// decoders do, leaving the periodic traces of upsampling.
enum class SimulatedDecoder {
  kTransposedConvolution,  // stride-2 transposed convolution, uneven 3 x 3 kernel (checkerboard)
  kNearestSmoothed,        // nearest-neighbour 2x, then a 3 x 3 smoothing convolution
};
Image simulate_decoder_output(const Image& picture, SimulatedDecoder decoder);

}  // namespace residue
