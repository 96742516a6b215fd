#include "residue/training/prepare.hpp"

#include <malloc.h>

#include <atomic>
#include <chrono>
#include <mutex>
#include <thread>

#include "residue/features/fingerprint.hpp"
#include "residue/features/transforms.hpp"
#include "residue/training/applicability.hpp"
#include "residue/training/cache.hpp"

namespace residue {

nlohmann::json file_facts_to_json(const FileFacts& f) {
  return {{"format", f.format},
          {"width", f.width},
          {"height", f.height},
          {"channels", f.channels},
          {"alpha_dropped", f.alpha_dropped},
          {"jpeg_quality", f.jpeg_quality ? nlohmann::json(*f.jpeg_quality) : nlohmann::json(nullptr)},
          {"block_grid_strength", f.block_grid_strength},
          {"file_bytes", f.file_bytes},
          {"dhash", f.dhash},
          {"has_exif", f.metadata.has_exif},
          {"camera_make", f.metadata.camera_make},
          {"camera_model", f.metadata.camera_model},
          {"has_xmp", f.metadata.has_xmp},
          {"digital_source_type", f.metadata.digital_source_type},
          {"generation_text", f.metadata.generation_text},
          {"processing", processing_to_json(f.processing)},
          {"extract_ms", f.extract_ms}};
}

FileFacts file_facts_from_json(const nlohmann::json& j) {
  FileFacts f;
  f.format = j.at("format");
  f.width = j.at("width");
  f.height = j.at("height");
  f.channels = j.at("channels");
  f.alpha_dropped = j.at("alpha_dropped");
  if (!j.at("jpeg_quality").is_null()) f.jpeg_quality = j.at("jpeg_quality").get<int>();
  f.block_grid_strength = j.at("block_grid_strength");
  f.file_bytes = j.at("file_bytes");
  f.dhash = j.at("dhash");
  f.metadata.has_exif = j.at("has_exif");
  f.metadata.camera_make = j.at("camera_make");
  f.metadata.camera_model = j.at("camera_model");
  f.metadata.has_xmp = j.at("has_xmp");
  f.metadata.digital_source_type = j.at("digital_source_type");
  f.metadata.generation_text = j.at("generation_text");
  // Rows stored before processing evidence existed, or by another kProcessingVersion, throw here
  // and so are a miss: the file is extracted again (the vector itself would be unchanged).
  f.processing = processing_from_json(j.at("processing"));
  f.extract_ms = j.value("extract_ms", 0.0);  // absent in rows stored before it was recorded
  return f;
}

Result<PreparedItem> prepare_bytes(std::span<const std::uint8_t> bytes, const std::string& key,
                                   const ExtractOptions& options, FeatureCache* cache) {
  PreparedItem item;
  if (cache != nullptr) {
    if (auto hit = cache->find(key)) {
      item.facts = std::move(hit->facts);
      item.features = std::move(hit->features);
      item.from_cache = true;
      return item;
    }
  }
  const auto start = std::chrono::steady_clock::now();
  auto extraction = extract_bytes(bytes, options);
  if (!extraction) return extraction.error();
  item.facts = file_facts(*extraction, bytes, options.limits);
  item.features = std::move(extraction->features);
  item.facts.extract_ms =
      std::chrono::duration<double, std::milli>(std::chrono::steady_clock::now() - start).count();
  if (cache != nullptr) (void)cache->store(key, {item.facts, item.features});
  return item;
}

FileFacts file_facts(const Extraction& extraction, std::span<const std::uint8_t> bytes,
                     const DecodeLimits& limits) {
  FileFacts f;
  f.format = std::string(image_format_name(extraction.header.format));
  f.width = extraction.header.width;
  f.height = extraction.header.height;
  f.channels = extraction.channels;
  f.alpha_dropped = extraction.alpha_dropped;
  if (extraction.compression.jpeg) f.jpeg_quality = extraction.compression.jpeg->quality;
  f.block_grid_strength = extraction.compression.block_grid_strength;
  f.file_bytes = bytes.size();
  if (auto preview = decode_preview(bytes, limits)) f.dhash = difference_hash(*preview);
  f.metadata = read_metadata(bytes);
  f.processing = extraction.processing;
  f.extract_ms = extraction.timings.total_ms;
  return f;
}

PreparedCopies prepare_copies(std::span<const std::uint8_t> bytes, const std::string& sha256,
                              const ExtractOptions& options, FeatureCache* cache, Augment augment) {
  PreparedCopies out;
  for (const auto& transform : augmentation_transforms(augment, sha256)) {
    // Copies are cached under (file hash, transform): the transform is only applied on a miss.
    std::string key = sha256;
    key.append(":").append(transform);
    std::optional<PreparedItem> copy;
    if (cache != nullptr) {
      if (auto hit = cache->find(key)) {
        copy = PreparedItem{};
        copy->facts = std::move(hit->facts);
        copy->features = std::move(hit->features);
        copy->from_cache = true;
      }
    }
    if (!copy) {
      auto processed = apply_transform(bytes, transform, options.limits);
      auto prepared = processed ? prepare_bytes(*processed, key, options, nullptr)
                                : Result<PreparedItem>(processed.error());
      if (!prepared) {
        out.failed.push_back(transform);  // e.g. a downscaled copy too small for a window: the image stays
        continue;
      }
      copy = std::move(*prepared);
      if (cache != nullptr) (void)cache->store(key, {copy->facts, copy->features});
    }
    copy->sha256 = sha256;
    copy->augmentation = transform;
    out.made.push_back(std::move(*copy));
  }
  return out;
}

namespace {

struct Outcome {
  std::optional<PreparedItem> item;
  std::optional<Error> error;
  std::vector<PreparedItem> copies;
  size_t copies_failed = 0;
};

Outcome prepare_one(const LabelledFile& file, const ExtractOptions& options, FeatureCache* cache,
                    Augment augment) {
  auto bytes = read_file(file.path, options.limits);
  if (!bytes) return {std::nullopt, bytes.error(), {}, 0};
  const std::string sha = sha256_hex(*bytes);
  auto item = prepare_bytes(*bytes, sha, options, cache);
  if (!item) return {std::nullopt, item.error(), {}, 0};
  item->file = file;
  item->sha256 = sha;
  PreparedCopies copies = prepare_copies(*bytes, sha, options, cache, augment);
  for (auto& copy : copies.made) copy.file = file;
  return {std::move(*item), std::nullopt, std::move(copies.made), copies.failed.size()};
}

}  // namespace

PrepareReport prepare_dataset(const Dataset& dataset, const ExtractOptions& options, FeatureCache* cache,
                              int jobs, const ProgressFn& progress, Augment augment) {
  const auto start = std::chrono::steady_clock::now();
  const size_t n = dataset.files.size();
  std::vector<Outcome> outcomes(n);
  std::atomic<size_t> next{0};
  std::atomic<size_t> done{0};
  std::mutex progress_mutex;
  auto worker = [&] {
    for (size_t i = next++; i < n; i = next++) {
      outcomes[i] = prepare_one(dataset.files[i], options, cache, augment);
      const size_t d = ++done;
      // Decode buffers freed between long-lived results leave holes that glibc's heap does not
      // give back: RSS grew by ~0.8 MB per image (8.8 GB for 11,000, docs/performance.md).
      // Returning free pages every 64 images keeps it flat for ~1 % of the time.
      if (d % 64 == 0) malloc_trim(0);
      if (progress) {
        std::lock_guard lock(progress_mutex);
        progress(d, n);
      }
    }
  };
  std::vector<std::thread> threads;
  threads.reserve(static_cast<size_t>(std::max(1, jobs)));
  for (int j = 0; j < std::max(1, jobs); ++j) threads.emplace_back(worker);
  for (auto& t : threads) t.join();

  PrepareReport report;
  for (size_t i = 0; i < n; ++i) {
    if (outcomes[i].item) {
      (outcomes[i].item->from_cache ? report.cached : report.extracted) += 1;
      if (outcomes[i].item->from_cache)
        report.cached_extract_seconds += outcomes[i].item->facts.extract_ms / 1000.0;
      report.items.push_back(std::move(*outcomes[i].item));
      for (auto& copy : outcomes[i].copies) {
        copy.source = report.items.size() - 1;
        if (!copy.from_cache) report.copies_extracted += 1;
        report.copies.push_back(std::move(copy));
      }
      report.copies_failed += outcomes[i].copies_failed;
    } else {
      report.failed.emplace_back(dataset.files[i], *outcomes[i].error);
    }
  }
  report.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
  return report;
}

}  // namespace residue
