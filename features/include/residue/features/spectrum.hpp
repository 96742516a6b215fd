// Windowed 2-D power spectrum (FFTW) and its azimuthal average.
//
// Conventions: input is an N x N real array, row-major. The window is the 2-D periodic Hann
// window w(x) w(y), w(k) = 0.5 - 0.5 cos(2 pi k / N) (scipy.signal.get_window("hann", N)).
// Power P[v N + u] = |sum_{y,x} w(x) w(y) f(y,x) exp(-2 pi i (u x + v y) / N)|^2 / sum(w^2),
// unshifted (numpy.fft order: index u stands for frequency u/N, or (u - N)/N for u >= N/2, in
// cycles per pixel). Plans are created once per size under a lock and reused; thread-safe.
#pragma once

#include <vector>

namespace residue {

// Full N x N power spectrum (N >= 2, even).
std::vector<double> hann_power_spectrum(const float* image, int n);

// Welch's average of Hann-windowed power spectra (Welch 1967) over the non-overlapping
// `segment` x `segment` blocks of an N x N array; segment x segment result, same normalisation.
// Averaging cuts the periodogram's variance so single-bin peaks can be measured reliably.
std::vector<double> welch_power_spectrum(const float* image, int n, int segment);

// Divides each value by its row median and its column median and multiplies by the overall
// median, so lines of energy along the axes (straight edges in the scene) are flattened while
// isolated peaks stay. Returns a new N x N array.
std::vector<double> flatten_axis_ridges(const std::vector<double>& power, int n);

// Mean power in `bins` equal-width rings of radius r = sqrt(fu^2 + fv^2) over [0, 0.5) cycles/pixel.
// Frequencies with r >= 0.5 (the corners) are left out. Empty rings give 0.
std::vector<double> azimuthal_average(const std::vector<double>& power, int n, int bins);

// Signed frequency of index k in an N-point DFT, in cycles per pixel (numpy.fft.fftfreq).
inline double dft_frequency(int k, int n) { return (k < n / 2 ? k : k - n) / static_cast<double>(n); }

}  // namespace residue
