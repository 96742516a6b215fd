// The model file: one self-describing JSON document (format "residue-model", version 1) with the
// feature schema, scaler, linear weights, Platt calibration, thresholds and training provenance.
// Written atomically; loading refuses another format, version, extractor or schema.
//
// Scoring: z = (x - mean) / scale on the model's features; margin m = w . z + b (positive towards
// "generated"); P(generated) = 1 / (1 + exp(A m + B)) at the training base rate, optionally moved
// to a deployment base rate (calibration.hpp, shift_prior). Bands: "likely-generated" when
// P >= thresholds.likely_generated, "likely-camera" when P < thresholds.likely_camera,
// "inconclusive" between.
#pragma once

#include <filesystem>
#include <map>
#include <nlohmann/json.hpp>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "residue/features/extract.hpp"
#include "residue/training/applicability.hpp"
#include "residue/training/calibration.hpp"
#include "residue/training/camera_model.hpp"
#include "residue/training/conformal.hpp"
#include "residue/training/drift.hpp"
#include "residue/training/linear.hpp"

namespace residue {

inline constexpr const char* kModelFormat = "residue-model";
inline constexpr int kModelFormatVersion = 1;
// The earlier extractor whose models still load (their values are unchanged in this one).
inline constexpr std::string_view kCompatibleExtractorVersion = "2.0.0";

struct Thresholds {
  double likely_generated = 0.5;      // P at or above: "likely-generated" (chosen for target_fpr)
  double likely_camera = 0.5;         // P below: "likely-camera"
  double target_fpr = 0.01;           // camera FPR promised (upper confidence bound) at likely_generated
  double generated_miss = 0.05;       // share of generated images allowed below likely_camera
  std::optional<FprPromise> promise;  // absent in models from before it existed
};

// "at most 1 % with 95 % confidence, from 412 camera images in 300 groups", or what is missing.
std::string promise_text(const Thresholds& thresholds);

struct Model {
  std::string id;       // content fingerprint, e.g. "m-3fa2c1d09e8b7a65"
  std::string created;  // UTC, ISO 8601
  std::string extractor_version;
  std::string schema_id;
  std::vector<std::string> features;  // names used, in weight order (all, or a subset)
  std::vector<std::string> families;  // family of each used feature
  std::vector<size_t> feature_index;  // position of each used feature in the full vector
  Scaler scaler;
  LinearModel linear;
  // Window-level models learn from each analysis window and pool the windows' margins into the
  // image's: "mean" or "top-third" (the mean of the highest third). Image-level: "image", "".
  std::string instances = "image";  // "image" or "windows"
  std::string pooling;
  PlattSigmoid calibration;
  double training_prior = 0.5;  // share of generated images in the calibration data
  Thresholds thresholds;
  nlohmann::ordered_json provenance;           // counts, audit warnings, CV metrics, settings, lineage
  std::optional<TrainingReference> reference;  // for drift; absent in models from before it existed
  std::optional<Applicability> applicability;  // absent in models from before it existed
  // What the thresholds were set on, and the calibration camera scores behind every record's
  // camera tail (conformal.hpp); absent in models from before calibration was recorded.
  std::optional<CalibrationRecord> calibration_set;
  std::optional<CameraTail> camera_tail;
  // "two-class" (the linear SVM on camera and generated images) or "camera-only" (trained on
  // camera photos alone: the margin is the camera-only score, `calibration` maps it monotonically
  // to [0, 1] so that thresholds work as for any model, and no generator was seen).
  std::string kind = "two-class";
  // The camera model (camera_model.hpp): the surprise family's camera pixel model, and the
  // camera-only density with its tail. Absent in models of older extractors.
  std::optional<CameraPixelModel> camera_pixels;
  std::optional<CameraOnly> camera_only;
  // Set on loading a model of kCompatibleExtractorVersion: what it lacks (every record says it).
  // Not part of the file.
  std::string note;
};

// The vector a model scores: `features` with the surprise family's derived values filled by the
// model's camera pixel model (a copy; unchanged without one).
FeatureVector model_vector(const Model& model, const FeatureVector& features);

// What the camera-only model says about an image.
struct CameraOnlyScore {
  double score = 0.0;                      // the camera-only score (camera_model.hpp)
  double density = 0.0;                    // sqrt(mean over families of d_f^2)
  std::map<std::string, double> distance;  // d_f per family
  std::optional<TailPosition> tail;        // among the out-of-fold camera photos
  bool unusual = false;                    // tail p-value at or below the model's `unusual`
  double gap = 0.0;                        // surprise.gap.full of the image, bits per pixel
  double gap_spread = 0.0;                 // standard deviation of the windows' gaps
  double gap_max = 0.0;                    // the largest window gap
};

// Sets the model's thresholds, promise, calibration record and camera tail from `calibrated`
// (the likely-camera threshold only when generated images were given; it never exceeds the
// likely-generated one).
void apply_calibration(Model& model, const Calibrated& calibrated, double target_fpr, double generated_miss);

struct Score {
  double margin = 0.0;
  double p_generated = 0.0;
  std::map<std::string, double> contributions;  // per family: sum of w_j z_j (bias excluded)
  std::map<std::string, double> distances;      // per family: sqrt(mean z_j^2), in training std. devs
  std::optional<DomainCheck> domain;            // absent when the model has no applicability reference
  std::string band;                             // after the domain check (`reasons` say why inconclusive)
  std::vector<std::string> reasons;
  std::optional<CameraOnlyScore> camera_only;  // absent when the model has no camera-only density
};

// The image's margin from its windows' margins under a pooling ("mean" or "top-third"), and the
// windows it averaged (indices).
double pooled_margin(const std::vector<double>& window_margins, const std::string& pooling,
                     std::vector<size_t>* chosen = nullptr);

// Scores a vector (`given`, its surprise values filled by the model first: model_vector; a
// camera-only model scores it by its camera-only score). A window-level model pools its windows'
// margins (`features.windows`; without
// them it scores the pooled vector, which equals mean pooling for every non-peak value); the
// contributions are then those of the averaged windows, exactly. The applicability check always
// looks at the image's vector. With `processing` (the file's evidence), processing the training data never
// showed also makes the band "inconclusive". `thresholds` overrides the model's.
Score score(const Model& model, const FeatureVector& given, std::optional<double> prior = std::nullopt,
            const ProcessingEvidence* processing = nullptr, const Thresholds* thresholds = nullptr);
std::string band_of(const Thresholds& thresholds, double p);

nlohmann::ordered_json model_to_json(const Model& model);
// Sets model.id to "m-" and 16 hex digits of the SHA-256 of the model's JSON (id left empty),
// leaving out when and how fast it was made ("created", the calibration's "created", provenance's
// "preparation"): the same data and settings give the same id, whether the vectors came from the
// files, the feature cache or collected records. Call again after changing anything in the model.
void stamp_model_id(Model& model);
Result<Model> model_from_json(const nlohmann::json& json);
Result<bool> save_model(const Model& model, const std::filesystem::path& path);
Result<Model> load_model(const std::filesystem::path& path);

// Positions of the named features in the full vector, for a subset selected by name prefixes
// (empty: every value but the coding surprise's, `surprise.*`, which the camera model reads
// instead). Fails on a prefix that matches nothing.
inline constexpr const char* kSurprisePrefix = "surprise.";
Result<std::vector<size_t>> select_features(const std::vector<std::string>& prefixes);

}  // namespace residue
