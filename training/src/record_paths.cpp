#include "residue/training/record_paths.hpp"

#include <cctype>

namespace residue {

namespace {

template <typename J>
std::string path_from(const J& record) {
  if (record.contains("path_bytes") && record["path_bytes"].is_string()) {
    return percent_decode(record["path_bytes"].template get<std::string>());
  }
  if (record.contains("path") && record["path"].is_string())
    return record["path"].template get<std::string>();
  return {};
}

}  // namespace

std::string path_of(const nlohmann::json& record) { return path_from(record); }
std::string path_of(const nlohmann::ordered_json& record) { return path_from(record); }

std::string percent_encode(const std::string& bytes) {
  static constexpr char kHex[] = "0123456789ABCDEF";
  std::string out;
  for (const char c : bytes) {
    const auto b = static_cast<unsigned char>(c);
    if (std::isalnum(b) != 0 || c == '-' || c == '.' || c == '_' || c == '~' || c == '/') {
      out += c;
    } else {
      out += '%';
      out += kHex[b >> 4];
      out += kHex[b & 15];
    }
  }
  return out;
}

std::string percent_decode(const std::string& text) {
  const auto hex = [](char c) -> int {
    if (c >= '0' && c <= '9') return c - '0';
    if (c >= 'A' && c <= 'F') return c - 'A' + 10;
    if (c >= 'a' && c <= 'f') return c - 'a' + 10;
    return -1;
  };
  std::string out;
  for (size_t i = 0; i < text.size(); ++i) {
    if (text[i] == '%' && i + 2 < text.size() && hex(text[i + 1]) >= 0 && hex(text[i + 2]) >= 0) {
      out += static_cast<char>(hex(text[i + 1]) * 16 + hex(text[i + 2]));
      i += 2;
    } else {
      out += text[i];
    }
  }
  return out;
}

}  // namespace residue
