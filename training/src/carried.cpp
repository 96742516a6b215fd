#include "residue/training/carried.hpp"

#include <openssl/evp.h>

#include <algorithm>
#include <bit>
#include <cctype>
#include <cstring>
#include <fstream>
#include <map>

#include "residue/training/record_paths.hpp"

namespace residue {

namespace {

static_assert(std::endian::native == std::endian::little, "vectors are carried as little-endian doubles");

nlohmann::ordered_json vector_json(const PreparedItem& item) {
  nlohmann::json facts = file_facts_to_json(item.facts);
  facts.erase("extract_ms");  // how long it took here: records of the same image stay the same
  return {{"facts", facts}, {"vector", encode_vector(item.features.values)}};
}

Result<PreparedItem> vector_from_json(const nlohmann::json& j) {
  PreparedItem item;
  try {
    item.facts = file_facts_from_json(j.at("facts"));
  } catch (const std::exception& e) {
    return make_error(ErrorCode::kCorrupt, std::string("its facts are not readable: ") + e.what());
  }
  if (!j.contains("vector") || !j["vector"].is_string())
    return make_error(ErrorCode::kCorrupt, "it has no vector");
  auto values = decode_vector(j["vector"].get<std::string>());
  if (!values || values->size() != feature_names().size()) {
    return make_error(ErrorCode::kCorrupt,
                      "its vector is not " + std::to_string(feature_names().size()) + " base64 doubles");
  }
  item.features.values = std::move(*values);
  item.from_cache = true;
  return item;
}

std::string path_key(const std::string& path) {
  std::error_code ec;
  const auto canonical = std::filesystem::weakly_canonical(path, ec);
  return ec ? std::filesystem::path(path).lexically_normal().string() : canonical.string();
}

std::optional<Label> parse_label(const nlohmann::json& v) {
  if (v == "camera" || v == 0) return Label::kCamera;
  if (v == "generated" || v == 1) return Label::kGenerated;
  return std::nullopt;
}

}  // namespace

std::string encode_vector(const std::vector<double>& values) {
  const size_t bytes = values.size() * sizeof(double);
  std::string out(4 * ((bytes + 2) / 3) + 1, '\0');
  const int written =
      EVP_EncodeBlock(reinterpret_cast<unsigned char*>(out.data()),
                      reinterpret_cast<const unsigned char*>(values.data()), static_cast<int>(bytes));
  out.resize(static_cast<size_t>(std::max(0, written)));
  return out;
}

std::optional<std::vector<double>> decode_vector(const std::string& text) {
  // A vector is a few kilobytes; far larger text is not one (and would overflow libcrypto's int).
  constexpr size_t kLongest = size_t{1} << 26;
  if (text.size() % 4 != 0 || text.size() > kLongest) return std::nullopt;
  std::string raw(3 * (text.size() / 4) + 1, '\0');
  const int n =
      EVP_DecodeBlock(reinterpret_cast<unsigned char*>(raw.data()),
                      reinterpret_cast<const unsigned char*>(text.data()), static_cast<int>(text.size()));
  if (n < 0) return std::nullopt;
  // EVP_DecodeBlock counts the padding's zero bytes: take them off again.
  auto length = static_cast<size_t>(n);
  for (size_t i = text.size(); i > 0 && text[i - 1] == '=' && length > 0; --i) --length;
  if (length % sizeof(double) != 0) return std::nullopt;
  std::vector<double> values(length / sizeof(double));
  std::memcpy(values.data(), raw.data(), length);
  return values;
}

nlohmann::ordered_json carried_to_json(const PreparedItem& item, const PreparedCopies* copies,
                                       Augment copies_level) {
  nlohmann::ordered_json j = {{"extractor", std::string(kExtractorVersion)},
                              {"schema", feature_schema_id()},
                              {"encoding", kVectorEncoding}};
  j.update(vector_json(item));
  if (copies != nullptr && copies_level != Augment::kNone) {
    nlohmann::ordered_json made = nlohmann::ordered_json::array();
    for (const auto& c : copies->made) {
      nlohmann::ordered_json m = {{"transform", c.augmentation}};
      m.update(vector_json(c));
      made.push_back(std::move(m));
    }
    j["copies"] = {{"level", augment_name(copies_level)}, {"made", made}, {"failed", copies->failed}};
  }
  return j;
}

Result<CarriedFeatures> carried_from_json(const nlohmann::json& json) {
  const nlohmann::json& j = json;
  if (!j.is_object()) return make_error(ErrorCode::kCorrupt, "\"features\" is not an object");
  const std::string extractor = j.value("extractor", "");
  const std::string schema = j.value("schema", "");
  if (extractor != kExtractorVersion || schema != feature_schema_id()) {
    return make_error(ErrorCode::kUnsupported,
                      "the vector was made by extractor " + (extractor.empty() ? "(unknown)" : extractor) +
                          " with schema " + (schema.empty() ? "(unknown)" : schema) + "; this residue is " +
                          std::string(kExtractorVersion) + " with schema " + feature_schema_id() +
                          ": extract the images again with this version");
  }
  if (j.value("encoding", "") != kVectorEncoding)
    return make_error(ErrorCode::kCorrupt, "vectors are not encoded as " + std::string(kVectorEncoding));
  auto item = vector_from_json(j);
  if (!item) return item.error();
  CarriedFeatures out{std::move(*item), Augment::kNone, {}};
  if (j.contains("copies")) {
    const auto& c = j["copies"];
    const auto level = c.is_object() ? parse_augment(c.value("level", "")) : std::nullopt;
    if (!level || !c.contains("made") || !c["made"].is_array())
      return make_error(ErrorCode::kCorrupt, "its copies are not readable");
    out.copies_level = *level;
    for (const auto& m : c["made"]) {
      auto copy =
          m.is_object() ? vector_from_json(m) : Result<PreparedItem>(make_error(ErrorCode::kCorrupt, ""));
      if (!copy || !m.contains("transform") || !m["transform"].is_string())
        return make_error(ErrorCode::kCorrupt, "a copy is not readable");
      copy->augmentation = m["transform"];
      out.copies.made.push_back(std::move(*copy));
    }
    for (const auto& f : c.value("failed", nlohmann::json::array())) {
      if (f.is_string()) out.copies.failed.push_back(f);
    }
  }
  return out;
}

bool is_records_file(const std::filesystem::path& path) {
  std::error_code ec;
  if (!std::filesystem::is_regular_file(path, ec)) return false;
  std::ifstream in(path);
  char c = 0;
  while (in.get(c)) {
    if (!std::isspace(static_cast<unsigned char>(c))) return c == '{';
  }
  return false;
}

Result<RecordsForTraining> load_records_for_training(const std::vector<std::filesystem::path>& files,
                                                     const Dataset* labels, Augment augment, bool at_most) {
  RecordsForTraining out;
  std::map<std::string, size_t> wanted;  // path key -> index in labels
  if (labels != nullptr) {
    for (size_t i = 0; i < labels->files.size(); ++i) wanted.emplace(path_key(labels->files[i].path), i);
  }
  struct Found {
    PreparedItem item;
    PreparedCopies copies;
  };
  std::map<std::string, Found> found;  // path key -> item (sorted by path when there are no labels)
  std::map<size_t, std::string> by_label_index;
  for (const auto& file : files) {
    std::ifstream in(file);
    if (!in) return make_error(ErrorCode::kUnreadable, "cannot open records " + file.string());
    std::string line;
    size_t line_number = 0;
    while (std::getline(in, line)) {
      ++line_number;
      if (line.find_first_not_of(" \t\r") == std::string::npos) continue;
      ++out.records;
      const std::string where = file.string() + ":" + std::to_string(line_number);
      const auto record = nlohmann::json::parse(line, nullptr, false);
      if (record.is_discarded() || !record.is_object()) {
        out.skipped.emplace_back(where, "not a JSON object");
        continue;
      }
      const std::string path = path_of(record);
      const std::string name = path.empty() ? where : path;
      if (record.contains("error")) {
        out.skipped.emplace_back(name, "an error record: " + record["error"].value("message", ""));
        continue;
      }
      if (!record.contains("features")) {
        out.skipped.emplace_back(name, "the record carries no features (scan or worker --with-features)");
        continue;
      }
      auto carried = carried_from_json(record["features"]);
      if (!carried) {
        if (carried.error().code == ErrorCode::kUnsupported)
          return make_error(ErrorCode::kUnsupported, where + ": " + carried.error().message);
        out.skipped.emplace_back(name, carried.error().message);
        continue;
      }
      if (at_most) augment = std::min(augment, carried->copies_level);
      if (augment != Augment::kNone && carried->copies_level < augment) {
        return make_error(ErrorCode::kUnsupported,
                          where + ": the record carries " + augment_name(carried->copies_level) +
                              " copies, and training asks for " + augment_name(augment) +
                              ": extract with --with-features --copies " + augment_name(augment) +
                              ", or train with --augment " + augment_name(carried->copies_level));
      }
      PreparedItem& item = carried->item;
      item.sha256 = record.value("sha256", "");
      // Bytes sent without a name (a queue's --bytes jobs, the service) are told apart by content.
      const std::string key = path.empty() || path == "-" ? "sha256:" + item.sha256 : path_key(path);
      if (labels != nullptr) {
        const auto w = wanted.find(key);
        if (w == wanted.end()) {
          ++out.unlabelled;
          out.skipped.emplace_back(name, "not in the labels");
          continue;
        }
        item.file = labels->files[w->second];
        if (by_label_index.contains(w->second)) {
          out.skipped.emplace_back(name, "a second record of the same file (the first is used)");
          continue;
        }
        by_label_index.emplace(w->second, key);
      } else {
        const auto label = record.contains("label") ? parse_label(record["label"]) : std::nullopt;
        if (!label) {
          ++out.unlabelled;
          out.skipped.emplace_back(name, "no label: give --labels, or a \"label\" in the record");
          continue;
        }
        item.file.path = path;
        item.file.label = *label;
        item.file.generator = *label == Label::kCamera ? "camera" : record.value("generator", "unnamed");
        if (item.file.generator.empty()) item.file.generator = "unnamed";
        item.file.group = record.value("group", "");
        item.file.folder = std::filesystem::path(path).parent_path().string();
        if (found.contains(key)) {
          out.skipped.emplace_back(name, "a second record of the same file (the first is used)");
          continue;
        }
      }
      found.emplace(key, Found{std::move(item), std::move(carried->copies)});
    }
  }
  std::vector<std::string> order;
  if (labels != nullptr) {
    for (const auto& [index, key] : by_label_index) order.push_back(key);
    out.missing = labels->files.size() - by_label_index.size();
  } else {
    for (const auto& [key, f] : found) order.push_back(key);
  }
  // Items in order, each followed by its copies in the order prepare_dataset gives them.
  for (const auto& key : order) {
    Found& f = found.at(key);
    out.items.push_back(std::move(f.item));
    const size_t source = out.items.size() - 1;
    const auto wanted_transforms = augmentation_transforms(augment, out.items.back().sha256);
    for (auto& copy : f.copies.made) {
      if (std::find(wanted_transforms.begin(), wanted_transforms.end(), copy.augmentation) ==
          wanted_transforms.end())
        continue;
      copy.file = out.items.back().file;
      copy.sha256 = out.items.back().sha256;
      copy.source = source;
      out.copies.push_back(std::move(copy));
    }
  }
  out.augment = augment;
  return out;
}

}  // namespace residue
