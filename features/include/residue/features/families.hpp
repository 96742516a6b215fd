// The three trace families, computed per analysis window. Each family has a fixed list of value
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
//  resampling — Kirchner (2008) fixed linear predictor, p-map p = exp(-e^2) (lambda = 1,
//               sigma = 1, tau = 2), and the peak strength of the p-map spectrum.
// Values whose name ends in ".peak" are aggregated over windows by mean and max; others by mean.
#pragma once

#include <string>
#include <vector>

#include "residue/features/image.hpp"

namespace residue {

// What every family sees of one window: the tile and its BT.601 luma.
struct WindowInput {
  const Tile& tile;
  std::vector<float> luma;
};

const std::vector<std::string>& spectral_names();
std::vector<double> spectral_window(const WindowInput& window);

const std::vector<std::string>& noise_names();
std::vector<double> noise_window(const WindowInput& window);

const std::vector<std::string>& resampling_names();
std::vector<double> resampling_window(const WindowInput& window);

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

// Colour-filter-array traces of one window, from the residual e = x - (N + S + E + W) / 4 of
// each channel: log10(max/min) of the residual energy over the four 2 x 2 lattice positions, and
// the Pearson correlation of the red and blue residuals with the green one.
struct CfaTraces {
  double lattice_contrast[3] = {0, 0, 0};
  double residual_corr_rg = 1.0;
  double residual_corr_bg = 1.0;
};
CfaTraces cfa_traces(const Tile& tile);

}  // namespace residue
