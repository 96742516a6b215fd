// Evidence of everyday processing in a file: palette or few-colour quantisation, resampling with
// its factor, JPEG history (quality, double compression), screenshot-like flat colour areas, lossy
// WebP. Reported beside the score and used to decide whether a model may judge an image at all
// (training/applicability.hpp); never part of the learned vector, because in most collections
// processing differs between the classes and a model that learned it would score the processing.
//
// Conventions: samples on the 0..255 scale of image.hpp; frequencies in cycles per pixel.
// Thread safety: pure functions.
#pragma once

#include <array>
#include <cstdint>
#include <optional>
#include <string>
#include <vector>

#include "residue/features/compression.hpp"
#include "residue/features/decode.hpp"
#include "residue/features/families.hpp"

namespace residue {

// Bump when any decision below changes: evidence stored by another version (the feature cache,
// a model's processing profile) is then recomputed rather than trusted.
inline constexpr int kProcessingVersion = 3;

struct ResamplingTrace {
  bool detected = false;
  double frequency = 0.0;  // cycles/pixel of the p-map peak the windows agree on, folded to [0, 0.5]
  double strength = 0.0;   // median log10 peak-to-median ratio of the agreeing windows
  int windows_agreeing = 0;
  int windows = 0;
};

struct DoubleJpegTrace {
  bool detected = false;
  double strength = 0.0;  // median over the tested DCT modes of histogram_dips
  int modes_tested = 0;
};

struct ProcessingEvidence {
  std::uint64_t analysed_pixels = 0;
  std::uint32_t distinct_colours = 0;  // in the analysed windows
  bool palette_file = false;           // the container stores colour indices (PNG type 3, BMP <= 8 bit)
  bool grey_in_colour = false;         // three equal channels: judged as grey (at most 256 levels anyway)
  bool quantised = false;              // palette file, <= 256 colours, or a combed histogram
  bool lossy_webp = false;
  bool screenshot_like = false;
  bool damaged = false;         // a decoder warning says the data are damaged
  double histogram_gaps = 0.0;  // largest share, over channels, of empty levels inside the 1-99 % range
  double flat_share = 0.0;      // share of 4 x 4 blocks of one exact colour (clipped black/white excluded)
  // How much fine detail (noise, texture, sharp edges) the pixels still carry: fine_detail() of the
  // windows' luma, median over windows. Blurring, denoising and heavy recompression lower it.
  double fine_detail = 0.0;
  ResamplingTrace resampling;
  std::optional<int> jpeg_quality;               // from the quantisation tables (JPEG files)
  DoubleJpegTrace double_jpeg;                   // JPEG files
  std::vector<DecoderWarning> decoder_warnings;  // what the decoder reported and decoded past (decode.hpp)
  std::vector<std::string> notes;                // one plain sentence per finding
};

// Fine detail of one luma plane, in grey levels (0..255 scale): Immerkaer's (1996) noise estimate
// sqrt(pi/2) / (6 (W-2)(H-2)) * sum |I * N|, N = [[1,-2,1],[-2,4,-2],[1,-2,1]] (filters.hpp). For
// i.i.d. Gaussian noise of standard deviation s on a flat image it is s; it is 0 on a flat or
// linear ramp image; blur lowers it. Here it measures what is left of the finest scale, not noise.
double fine_detail(const float* luma, int width, int height);

// Kirchner (2008): a resampling factor w leaves p-map peaks at 1/w folded into [0, 0.5]. The
// factors consistent with a folded frequency f in (0, 0.5): upscaling by 1/(1-f) and 1/f,
// downscaling by 1/(1+f) and 1/(2-f) (in that order; empty for f outside (0, 0.5]).
std::vector<double> resampling_factor_candidates(double frequency);

// Orthonormal 8 x 8 type-II DCT of a block (row-major), as JPEG defines it (ITU-T T.81 A.3.3)
// and scipy.fft.dctn(norm="ortho") computes it.
std::array<double, 64> dct8x8(const std::array<double, 64>& block);

// Double quantisation (Popescu & Farid 2004, "Statistical tools for digital forensics"; Lukas &
// Fridrich 2003): a DCT coefficient quantised with step q1 and then with a smaller step q2 can
// only take values near multiples of q1 / q2, so levels in between stay (nearly) empty, at a
// period. Returned: the share of levels whose count is under 0.2 x the mean of the 5 levels
// around it, among levels where that mean is at least 20 (0 when fewer than 6 levels qualify).
// A single quantisation gives a smooth histogram and a share near 0. Our simplification: the
// paper looks for the period in the histogram's Fourier transform; we count the dips, which is
// blind to q1 < q2 (periodic heights without empty levels).
double histogram_dips(const std::vector<double>& histogram);

// Everything above for one decoded file (`jpeg`: the quality estimated from its tables).
// `windows`: the decoded tiles' WindowInputs when the features were extracted from them (their
// luma and p-map spectrum are reused); made here when null.
ProcessingEvidence assess_processing(const DecodedWindows& decoded,
                                     const std::optional<QualityEstimate>& jpeg,
                                     const std::vector<WindowInput>* windows = nullptr);

}  // namespace residue
