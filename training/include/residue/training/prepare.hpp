// Preparing a labelled dataset for training: hash each file, take its features from the cache or
// extract them (in parallel), and collect the file facts the audit needs.
#pragma once

#include <cstdint>
#include <functional>
#include <nlohmann/json.hpp>
#include <optional>
#include <span>
#include <string>
#include <vector>

#include "residue/features/extract.hpp"
#include "residue/features/metadata.hpp"
#include "residue/training/augment.hpp"
#include "residue/training/dataset.hpp"

namespace residue {

// What the audit looks at besides pixels: container, size, compression, metadata, fingerprint.
struct FileFacts {
  std::string format;
  int width = 0;
  int height = 0;
  int channels = 0;
  bool alpha_dropped = false;
  std::optional<int> jpeg_quality;
  double block_grid_strength = 1.0;
  std::uint64_t file_bytes = 0;
  std::uint64_t dhash = 0;  // difference hash of the picture (near duplicates)
  DeclaredMetadata metadata;
  ProcessingEvidence processing;  // reported and profiled for the applicability check, never learned
  double extract_ms = 0.0;        // one thread's time to decode, extract and read metadata (milliseconds)
};

// The facts as JSON (the feature cache's rows, records carrying features), and back; from_json
// throws on a missing member or on processing evidence of another kProcessingVersion.
nlohmann::json file_facts_to_json(const FileFacts& facts);
FileFacts file_facts_from_json(const nlohmann::json& json);

struct PreparedItem {
  LabelledFile file;
  std::string sha256;
  FileFacts facts;
  FeatureVector features;
  bool from_cache = false;
  // Augmented copies (augment.hpp): the transform applied, and the index of the original in
  // PrepareReport::items. Empty and 0 for the files themselves.
  std::string augmentation;
  size_t source = 0;
};

struct PrepareReport {
  std::vector<PreparedItem> items;                     // in dataset order, failures left out
  std::vector<PreparedItem> copies;                    // augmented copies of the items, if asked
  size_t copies_extracted = 0;                         // copies not found in the cache
  size_t copies_failed = 0;                            // copies that could not be made or extracted
  std::vector<std::pair<LabelledFile, Error>> failed;  // unreadable or undecodable files
  size_t extracted = 0;
  size_t cached = 0;
  double seconds = 0.0;
  // Extraction time the cache hits cost when they were first extracted (one thread's seconds):
  // what the cache saved this run, before dividing by the threads.
  double cached_extract_seconds = 0.0;
};

class FeatureCache;

// Features and facts of one image's bytes, from `cache` under `key` (its SHA-256, or
// "SHA-256:transform" for a copy) or extracted and stored there. No cache: always extracted.
Result<PreparedItem> prepare_bytes(std::span<const std::uint8_t> bytes, const std::string& key,
                                   const ExtractOptions& options, FeatureCache* cache);

// The facts of an image already extracted (`scan --with-features` reuses its scoring extraction).
FileFacts file_facts(const Extraction& extraction, std::span<const std::uint8_t> bytes,
                     const DecodeLimits& limits);

// An image's augmented copies (augment.hpp), in the order augmentation_transforms gives them, each
// from the cache or made and extracted: those made, and the transforms that could not be (a
// downscale too small for a window).
struct PreparedCopies {
  std::vector<PreparedItem> made;  // sha256 and augmentation set; file left empty
  std::vector<std::string> failed;
};
PreparedCopies prepare_copies(std::span<const std::uint8_t> bytes, const std::string& sha256,
                              const ExtractOptions& options, FeatureCache* cache, Augment augment);

// Called after each file with (done, total); from one thread at a time.
using ProgressFn = std::function<void(size_t done, size_t total)>;

// Extracts with `jobs` threads. With a cache, files whose content hash and extractor version are
// already stored are not decoded again, and new extractions are stored.
// With `augment`, each file's copies (augment.hpp) are made and extracted too, cached under
// (file hash, transform).
PrepareReport prepare_dataset(const Dataset& dataset, const ExtractOptions& options, FeatureCache* cache,
                              int jobs, const ProgressFn& progress = {}, Augment augment = Augment::kNone);

}  // namespace residue
