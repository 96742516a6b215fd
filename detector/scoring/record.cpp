#include "residue/detector/scoring/record.hpp"

#include <cctype>

#include "residue/features/surprise.hpp"
#include "residue/training/applicability.hpp"

namespace residue {

namespace {

// At text[i]: the length of the well-formed UTF-8 sequence that starts there (Unicode Standard,
// Table 3-7: no overlong forms, no surrogates, nothing above U+10FFFF), or 0 and in `bad` the length
// of its maximal subpart (the longest prefix of a well-formed sequence, at least 1 byte), which is
// what becomes one U+FFFD (Unicode Standard, section 3.9, "U+FFFD Substitution of Maximal Subparts").
size_t utf8_sequence(const std::string& text, size_t i, size_t& bad) {
  const auto byte = [&](size_t k) { return static_cast<unsigned char>(text[k]); };
  const unsigned char b0 = byte(i);
  bad = 1;
  if (b0 < 0x80) return 1;
  size_t n = 0;
  unsigned char lo = 0x80;
  unsigned char hi = 0xBF;
  if (b0 >= 0xC2 && b0 <= 0xDF) {
    n = 2;
  } else if (b0 >= 0xE0 && b0 <= 0xEF) {
    n = 3;
    if (b0 == 0xE0) lo = 0xA0;
    if (b0 == 0xED) hi = 0x9F;
  } else if (b0 >= 0xF0 && b0 <= 0xF4) {
    n = 4;
    if (b0 == 0xF0) lo = 0x90;
    if (b0 == 0xF4) hi = 0x8F;
  } else {
    return 0;
  }
  for (size_t k = 1; k < n; ++k) {
    if (i + k >= text.size()) return 0;
    const unsigned char b = byte(i + k);
    if (k == 1 ? (b < lo || b > hi) : (b < 0x80 || b > 0xBF)) return 0;
    bad = k + 1;
  }
  return n;
}

}  // namespace

bool is_valid_utf8(const std::string& text) {
  size_t bad = 0;
  for (size_t i = 0; i < text.size();) {
    const size_t n = utf8_sequence(text, i, bad);
    if (n == 0) return false;
    i += n;
  }
  return true;
}

std::string valid_utf8(const std::string& text) {
  std::string out;
  out.reserve(text.size());
  size_t bad = 0;
  for (size_t i = 0; i < text.size();) {
    const size_t n = utf8_sequence(text, i, bad);
    if (n == 0) {
      out += "\xEF\xBF\xBD";  // U+FFFD REPLACEMENT CHARACTER
      i += bad;
    } else {
      out.append(text, i, n);
      i += n;
    }
  }
  return out;
}

void set_path(nlohmann::ordered_json& record, const std::string& path) {
  if (is_valid_utf8(path)) {
    record["path"] = path;
    if (record.contains("path_bytes")) record.erase("path_bytes");
  } else {
    record["path"] = valid_utf8(path);
    record["path_bytes"] = percent_encode(path);
  }
}

std::string record_line(const nlohmann::ordered_json& record) {
  return record.dump(-1, ' ', false, nlohmann::ordered_json::error_handler_t::replace);
}

nlohmann::ordered_json error_record(const std::string& path, const Error& error) {
  nlohmann::ordered_json r;
  set_path(r, path);
  r["error"] = {{"code", std::string(error_code_name(error.code))}, {"message", error.message}};
  return r;
}

nlohmann::ordered_json features_record(const std::string& path, const Extraction& e) {
  nlohmann::ordered_json values = nlohmann::ordered_json::object();
  const auto& names = feature_names();
  // The coding surprise's NLL, expected cost and gap need a model's camera pixel model: null here.
  for (size_t i = 0; i < names.size(); ++i) {
    values[names[i]] = is_model_value(names[i]) ? nlohmann::ordered_json(nullptr)
                                                : nlohmann::ordered_json(e.features.values[i]);
  }
  nlohmann::ordered_json compression = {{"block_grid_strength", e.compression.block_grid_strength},
                                        {"jpeg_quality", nullptr}};
  if (e.compression.jpeg) {
    compression["jpeg_quality"] = e.compression.jpeg->quality;
    compression["jpeg_tables_standard"] = e.compression.jpeg->exact;
  }
  nlohmann::ordered_json r;
  set_path(r, path);
  nlohmann::ordered_json rest = {
      {"format", std::string(image_format_name(e.header.format))},
      {"width", e.header.width},
      {"height", e.header.height},
      {"bit_depth", e.header.bit_depth},
      {"channels", e.channels},
      {"alpha_dropped", e.alpha_dropped},
      {"windows",
       {{"size", e.layout.size}, {"count", e.layout.origins.size()}, {"reduced", e.layout.reduced}}},
      {"decoded_rows", e.decoded_rows},
      {"decoder_warnings", decoder_warnings_to_json(e.processing.decoder_warnings)},
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
        {"surprise", e.timings.surprise_ms},
        {"processing", e.timings.processing_ms},
        {"total", e.timings.total_ms}}},
  };
  r.update(rest);
  return r;
}

}  // namespace residue
