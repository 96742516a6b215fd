// The trace families, computed per analysis window. Each family has a fixed list of value
// names (`family.group.name`) and a function that fills the values of one window in that order.
//
// Published methods (see docs/features.md for the full citations and our choices):
//  spectral   — residual = luma - median3(luma); Hann-windowed power spectrum; azimuthal average
//               in 24 rings over [0, 0.5) cycles/pixel (Durall et al., CVPR 2020); power-law fit of
//               the decay over [0.25, 0.5) (Dzanic et al., NeurIPS 2020); peak-to-background
//               energy at the grid frequencies k N/2, k N/4, k N/8 that upsampling leaves
//               (Corvi et al., ICASSP 2023), measured on the Welch spectrum (64 px segments) of
//               |residual| with axis ridges flattened.
//  noise      — rich-model residuals (Fridrich & Kodovsky 2012) quantised with step c and T = 2,
//               folded pair co-occurrences; first-order SPAM with T = 2 (Pevny, Bas & Fridrich
//               2010); residual variance and kurtosis; Immerkaer (1996) noise level; 2 x 2
//               lattice contrast and cross-channel correlation of a linear-interpolation residual
//               that colour-filter-array demosaicing leaves (Popescu & Farid 2005).
//               Decay and grid peaks also on the Cb and Cr planes (ITU-R BT.601 chroma).
//               Higher-order co-occurrences (3rd order for every kernel, 4th for o2 and kv3) and
//               cross-colour co-occurrences of the R, G, B residuals at one pixel (Goljan,
//               Fridrich & Cogranne 2014), T = 2.
//  resampling — Kirchner (2008) fixed linear predictor, p-map p = exp(-e^2) (lambda = 1,
//               sigma = 1, tau = 2), and the peak strength of the p-map spectrum.
//  sensor     — noise level function per channel (Foi et al. 2008; Liu et al. 2008): variance of
//               the Immerkaer residual in 8 x 8 blocks, median per intensity bin, Theil-Sen line
//               v = a mu + b, fit error, Kendall's tau, spread between channels.
//  texture    — texture contrast (Zhong et al. 2023): 32 px patches ranked by texture diversity;
//               second-order residual co-occurrences and moments of the poorest and richest third.
//  coding     — JPEG-LS (LOCO-I) MED prediction with its 365 gradient contexts: conditional
//               residual entropy in bits per pixel at full, 1/2 and 1/4 scale (2 x 2 means).
//  surprise   — the same prediction, its residuals per activity class, and what a model of camera
//               photos makes of them (NLL, expected cost, their gap): surprise.hpp.
// Values whose name ends in ".peak" are aggregated over windows by mean and max; others by mean.
#pragma once

#include <array>
#include <optional>
#include <string>
#include <vector>

#include "residue/features/image.hpp"

namespace residue {

// What every family sees of one window: the tile, its BT.601 luma, and what two users share.
// A window belongs to one thread at a time.
struct WindowInput {
  WindowInput(const Tile& t, std::vector<float> l) : tile(t), luma(std::move(l)) {}
  const Tile& tile;
  std::vector<float> luma;
  // axis_profile() of the window's p-map spectrum (pmap_power()): made by the resampling family,
  // or on first use, and kept for the processing evidence's resampling trace (N/2 + 1 values, not
  // the N x N spectrum: a request keeps every window's).
  [[nodiscard]] const std::vector<double>& pmap_profile() const;
  mutable std::vector<double> pmap_profile_kept;  // empty until made
  // The MED prediction at full, 1/2 and 1/4 scale of the window's integer luma, one pass per scale
  // shared by the coding family (its cost in bits) and the surprise family (its per-class
  // statistics, then zeros for the model-filled values): made on first use and kept.
  struct Prediction {
    std::array<double, 3> bits{};
    std::vector<double> surprise_stats;
  };
  [[nodiscard]] const Prediction& prediction() const;
  mutable std::optional<Prediction> prediction_kept;
  // immerkaer_sigma() of the luma: the noise family's noise level and the processing evidence's
  // fine detail, made once.
  [[nodiscard]] double luma_noise_sigma() const;
  mutable std::optional<double> luma_noise_sigma_kept;
};

// The Hann-windowed power spectrum of a window's centred Kirchner p-map.
std::vector<double> pmap_power(const WindowInput& window);

// One WindowInput per tile (the tiles must outlive them).
std::vector<WindowInput> window_inputs(const std::vector<Tile>& tiles);

const std::vector<std::string>& spectral_names();
std::vector<double> spectral_window(const WindowInput& window);

const std::vector<std::string>& noise_names();
std::vector<double> noise_window(const WindowInput& window);

const std::vector<std::string>& resampling_names();
std::vector<double> resampling_window(const WindowInput& window);

const std::vector<std::string>& sensor_names();
std::vector<double> sensor_window(const WindowInput& window);

const std::vector<std::string>& texture_names();
std::vector<double> texture_window(const WindowInput& window);

const std::vector<std::string>& coding_names();
std::vector<double> coding_window(const WindowInput& window);

// --- building blocks, public for tests and for the explain pictures ---

// luma - median3(luma), N x N.
std::vector<float> denoise_residual(const float* luma, int n);

// Peak-to-background ratio at frequency bin (u, v): P(u, v) over the median of the 7 x 7
// neighbourhood without its central 3 x 3 (indices taken modulo N).
double peak_to_background(const std::vector<double>& power, int n, int u, int v);

// Mean peak-to-background ratio over the points (a N/p, b N/p), a, b in [0, p), of period p that
// are not on a coarser grid, split into points on an axis (a = 0 or b = 0) and off it.
struct GridPeaks {
  double axis = 1.0;
  double diagonal = 1.0;
};
GridPeaks grid_peaks(const std::vector<double>& power, int n, int period);

// Kirchner (2008) p-map of an N x N luma window (replicated borders).
std::vector<float> kirchner_pmap(const float* luma, int n);
// The same minus its mean: the input of the p-map spectrum.
std::vector<float> centred_kirchner_pmap(const float* luma, int n);

// Strongest periodic component of a p-map spectrum: the spectrum projected onto each axis (mean
// over the other), both axes summed, searched over [min_frequency, 0.5] cycles/pixel.
struct SpectralPeak {
  double ratio = 1.0;      // peak over the median of the searched band
  double frequency = 0.0;  // cycles per pixel
};
SpectralPeak projected_peak(const std::vector<double>& power, int n, double min_frequency);
// The projection itself: for k = 0 .. N/2, the mean of row k and column k of the N x N spectrum.
std::vector<double> axis_profile(const std::vector<double>& power, int n);
// projected_peak from the projection.
SpectralPeak profile_peak(const std::vector<double>& profile, int n, double min_frequency);

// Colour-filter-array traces of one window, from the residual e = x - (N + S + E + W) / 4 of
// each channel: log10(max/min) of the residual energy over the four 2 x 2 lattice positions, and
// the Pearson correlation of the red and blue residuals with the green one.
struct CfaTraces {
  double lattice_contrast[3] = {0, 0, 0};
  double residual_corr_rg = 1.0;
  double residual_corr_bg = 1.0;
};
CfaTraces cfa_traces(const Tile& tile);

// BT.601 chroma of a tile, Cb and Cr with their 128 offset (constant 128 for grey tiles).
std::array<std::vector<float>, 2> chroma_planes(const Tile& tile);

// Noise level function of one N x N plane (0..255). The residual is Immerkaer's
// N = [[1,-2,1],[-2,4,-2],[1,-2,1]] (blind to planes and ramps); each 8 x 8 block of it gives a
// variance sigma^2 with sigma = sqrt(pi/2) mean|r| / 6 (Immerkaer 1996) at the block's mean
// intensity mu. Blocks are binned by mu in 16 bins of 16 levels; the end bins (clipping) are
// skipped and a bin needs 6 blocks. Each bin's median variance (texture only adds variance, so the
// median keeps to the flat blocks while they are the majority) against its mean mu is fitted by a
// Theil-Sen line v = slope mu + offset: for Poisson-Gaussian noise (Foi et al. 2008) slope = a and
// offset = b.
struct NoiseLevelCurve {
  std::vector<double> intensity;  // per usable bin, increasing
  std::vector<double> variance;
  double slope = 0.0;
  double offset = 0.0;
  double relative_rmse = 0.0;  // RMS of the fit's residuals over the mean variance
  double kendall_tau = 0.0;    // rank agreement of variance with intensity, -1..1
};
NoiseLevelCurve noise_level_function(const float* plane, int n);

// Texture diversity of a size x size patch (Zhong et al. 2023): the sum of absolute differences
// of neighbours along rows, columns, the diagonal and the anti-diagonal.
double texture_diversity(const float* x, int stride, int size);
// Indices of the (n / patch)^2 patches of an N x N plane (row-major), poorest texture first;
// their diversities in `diversity` when given.
std::vector<int> patches_by_texture(const float* luma, int n, int patch,
                                    std::vector<double>* diversity = nullptr);

// 2 x 2 block means of an n x n plane of integer samples, rounded half up to integers: the next
// coarser scale of the coding and surprise families ((n / 2) x (n / 2)).
std::vector<int> halve_samples(const std::vector<int>& x, int n);
// Integer luma of a window (round half away from zero), n x n.
std::vector<int> integer_luma(const WindowInput& window);

// JPEG-LS (ISO/IEC 14495-1, A.3-A.4) median edge detector: min(a, b) if c >= max(a, b),
// max(a, b) if c <= min(a, b), else a + b - c (a west, b north, c north-west).
int med_predict(int a, int b, int c);
// Gradient quantisation of JPEG-LS (A.3.3) with the default thresholds for 8 bits (T1 = 3,
// T2 = 7, T3 = 21, NEAR = 0): region -4..4.
int jpegls_gradient_region(int d);
// Conditional entropy of the MED residuals (reduced modulo 256) given the JPEG-LS context
// (q1, q2, q3, sign-merged: 365 contexts), in bits per pixel, over pixels with all four causal
// neighbours, with Miller's (1955) bias correction. Integer samples 0..255, n x n. The same pass
// gives the surprise family's class sums when `classes` is given (equal to class_sums()).
struct ClassSums;
double coding_cost_bits(const std::vector<int>& samples, int n, ClassSums* classes = nullptr);

}  // namespace residue
