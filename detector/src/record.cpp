#include "residue/detector/record.hpp"

#include "residue/training/applicability.hpp"

namespace residue {

nlohmann::ordered_json error_record(const std::string& path, const Error& error) {
  return {{"path", path},
          {"error", {{"code", std::string(error_code_name(error.code))}, {"message", error.message}}}};
}

nlohmann::ordered_json features_record(const std::string& path, const Extraction& e) {
  nlohmann::ordered_json values = nlohmann::ordered_json::object();
  const auto& names = feature_names();
  for (size_t i = 0; i < names.size(); ++i) values[names[i]] = e.features.values[i];
  nlohmann::ordered_json compression = {{"block_grid_strength", e.compression.block_grid_strength},
                                        {"jpeg_quality", nullptr}};
  if (e.compression.jpeg) {
    compression["jpeg_quality"] = e.compression.jpeg->quality;
    compression["jpeg_tables_standard"] = e.compression.jpeg->exact;
  }
  return {
      {"path", path},
      {"format", std::string(image_format_name(e.header.format))},
      {"width", e.header.width},
      {"height", e.header.height},
      {"bit_depth", e.header.bit_depth},
      {"channels", e.channels},
      {"alpha_dropped", e.alpha_dropped},
      {"windows",
       {{"size", e.layout.size}, {"count", e.layout.origins.size()}, {"reduced", e.layout.reduced}}},
      {"decoded_rows", e.decoded_rows},
      {"decoder_warnings", e.decoder_warnings},
      {"extractor", {{"version", std::string(kExtractorVersion)}, {"schema", feature_schema_id()}}},
      {"features", values},
      {"compression_history", compression},
      {"processing", processing_to_json(e.processing)},
      {"timings_ms",
       {{"decode", e.timings.decode_ms},
        {"spectral", e.timings.spectral_ms},
        {"noise", e.timings.noise_ms},
        {"resampling", e.timings.resampling_ms},
        {"sensor", e.timings.sensor_ms},
        {"texture", e.timings.texture_ms},
        {"coding", e.timings.coding_ms},
        {"processing", e.timings.processing_ms},
        {"total", e.timings.total_ms}}},
  };
}

}  // namespace residue
