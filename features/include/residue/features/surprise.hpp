// Coding surprise: how far an image's pixels cost more (or less) to code than a model of camera
// photos expects. The idea of comparing an image's coding cost with the cost the model itself
// expects is that of Cozzolino, Poggi, Niessner & Verdoliva (ECCV 2024, "Zero-shot detection of
// AI-generated images"); the model here is ours, a context model in the way of JPEG-LS (LOCO-I,
// Weinberger, Seroussi & Sapiro 2000; ISO/IEC 14495-1), stated in docs/features.md:
//
//  - Prediction: the MED predictor of JPEG-LS on integer luma at full, 1/2 and 1/4 scale (2 x 2
//    means), over pixels with all four causal neighbours. The residual is reduced modulo 256 to
//    [-128, 127], as JPEG-LS does.
//  - Context: the activity class c = min(|Q1| + |Q2| + |Q3|, 8) of the JPEG-LS gradient regions
//    Q1..Q3 (default 8-bit thresholds T1 = 3, T2 = 7, T3 = 21): 9 classes from flat to busy.
//  - Camera model: in each class and level the residual follows a two-sided geometric
//    distribution, P(r) = (1 - t) / (1 + t) t^|r|, the distribution LOCO-I's coder assumes
//    (Merhav, Seroussi & Weinberger 2000). t is fitted on camera photos only, by maximum
//    likelihood: the pooled mean |r| = m gives t = (sqrt(1 + m^2) - 1) / m, since E|r| = 2t / (1 - t^2).
//
// What extraction computes (pure pixels, model-free): per level and class, the share of the
// window's pixels in the class (f_c) and their |r| summed and divided by all the window's pixels
// (g_c, so that f_c times the class's mean |r|). Both are averages over pixels, so a mean over
// windows is the same average over the image's pixels.
//
// What a camera model makes of them (per level, in bits per pixel):
//     NLL = sum_c f_c a_c + g_c b_c                 a_c = -log2((1 - t_c) / (1 + t_c)), b_c = -log2 t_c
//     H   = sum_c f_c (a_c + b_c E_c)               E_c = 2 t_c / (1 - t_c^2), the model's mean |r|
//     D   = NLL - H = sum_c b_c (g_c - f_c E_c)
// NLL is the cost of coding the image with the camera model, H the cost the model expects for an
// image with these contexts; D is positive where residuals are larger than camera photos' in the
// same contexts, negative where smaller (too smooth). All three are linear in (f, g), so the mean of
// the windows' values is the image's value. Slope: (D at 1/4 - D at full) / 2, per octave.
//
// Thread safety: pure functions and immutable data.
#pragma once

#include <array>
#include <string>
#include <vector>

namespace residue {

struct WindowInput;

inline constexpr int kSurpriseLevels = 3;   // full, 1/2, 1/4
inline constexpr int kSurpriseClasses = 9;  // activity |Q1| + |Q2| + |Q3|: 0..7, and 8 or more
inline constexpr int kSurpriseStats = kSurpriseLevels * kSurpriseClasses * 2;  // (f, g) per class
inline constexpr int kSurpriseDerived = kSurpriseLevels * 3 + 1;               // NLL, H, D; slope

// The activity class of a pixel from its causal neighbours a (W), b (N), c (NW), d (NE).
int surprise_class(int a, int b, int c, int d);
// The MED residual reduced modulo 256 to [-128, 127].
int reduced_residual(int x, int prediction);

// Per class: pixels and the sum of |r| over an n x n plane of integer samples (interior pixels
// with all four causal neighbours).
struct ClassSums {
  std::array<double, kSurpriseClasses> pixels{};
  std::array<double, kSurpriseClasses> abs_sum{};
};
// (A plain pass of its own, kept as the reference the shared pass is tested against: extraction
// takes the sums from coding_cost_bits' pass, families.hpp.)
ClassSums class_sums(const std::vector<int>& samples, int n);
// Appends f_c then g_c for each class (one level's kSurpriseClasses * 2 statistics).
void append_class_stats(const ClassSums& sums, std::vector<double>& out);

// The family: kSurpriseStats values (f_c then g_c for each class, level by level) followed by
// kSurpriseDerived zeros, which a camera model fills (fill_surprise).
// The statistics come from the window's shared prediction pass (WindowInput::prediction()).
const std::vector<std::string>& surprise_names();
std::vector<double> surprise_window(const WindowInput& window);

// Whether a surprise name is one a camera model fills (NLL, expected cost, gap, slope) rather than
// a statistic of the pixels.
bool is_model_value(const std::string& name);

// The camera model: t per level and class.
struct CameraPixelModel {
  std::array<std::array<double, kSurpriseClasses>, kSurpriseLevels> theta{};
  std::array<std::array<double, kSurpriseClasses>, kSurpriseLevels> mean_abs{};  // fitted m
  size_t images = 0;                                                             // rows fitted on
};

// Two-sided geometric distribution: t from a mean |r| (floored at 0.05, so that a class of flat
// pixels keeps a finite cost), its mean |r|, and its entropy in bits.
double tsgd_theta(double mean_abs);
double tsgd_mean_abs(double theta);
double tsgd_entropy_bits(double theta);
// -log2 P(r) under t.
double tsgd_cost_bits(double theta, int r);

// Fits t on rows of surprise statistics (each kSurpriseStats values, as the family lays them out):
// per level and class, m = sum of g / sum of f over the rows.
CameraPixelModel fit_camera_pixels(const std::vector<const double*>& stats_rows);

// NLL, H, D per level, then the slope of D: kSurpriseDerived values from one row of statistics.
std::array<double, kSurpriseDerived> surprise_values(const CameraPixelModel& model, const double* stats);

// The per-pixel gap at full scale, b_c (|r| - E_c), for the explain map (n x n, 0 on the first row
// and the outer columns).
std::vector<float> surprise_map(const CameraPixelModel& model, const std::vector<float>& luma, int n);

}  // namespace residue
