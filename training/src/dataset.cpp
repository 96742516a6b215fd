#include "residue/training/dataset.hpp"

#include <algorithm>
#include <fstream>

namespace residue {

namespace fs = std::filesystem;

namespace {

void walk(const fs::path& dir, std::vector<fs::path>& out,
          std::vector<std::pair<std::string, std::string>>& skipped) {
  std::error_code ec;
  fs::recursive_directory_iterator it(dir, fs::directory_options::skip_permission_denied, ec);
  if (ec) {
    skipped.emplace_back(dir.string(), "cannot list folder: " + ec.message());
    return;
  }
  for (; it != fs::recursive_directory_iterator(); it.increment(ec)) {
    if (ec) {
      skipped.emplace_back(dir.string(), "error while listing: " + ec.message());
      break;
    }
    if (!it->is_regular_file(ec)) continue;
    if (it->path().filename().string().front() == '.') {
      skipped.emplace_back(it->path().string(),
                           "hidden file (name starts with '.'); rename it to include it");
      continue;
    }
    out.push_back(it->path());
  }
}

}  // namespace

Result<Dataset> scan_labelled_folders(const fs::path& root) {
  std::error_code ec;
  if (!fs::is_directory(root, ec))
    return make_error(ErrorCode::kUnreadable, root.string() + " is not a folder");
  const fs::path camera = root / "camera";
  const fs::path generated = root / "generated";
  if (!fs::is_directory(camera, ec) && !fs::is_directory(generated, ec)) {
    return make_error(ErrorCode::kUnreadable,
                      root.string() +
                          " has neither camera/ nor generated/ (expected ROOT/camera/** and "
                          "ROOT/generated/<generator>/**)");
  }
  Dataset data;
  std::vector<fs::path> found;
  if (fs::is_directory(camera, ec)) walk(camera, found, data.skipped);
  if (fs::is_directory(generated, ec)) walk(generated, found, data.skipped);
  std::sort(found.begin(), found.end());
  for (const auto& p : found) {
    const fs::path rel = p.lexically_relative(root);
    auto part = rel.begin();
    LabelledFile f;
    f.path = p.string();
    f.folder = rel.parent_path().string();
    if (*part == "camera") {
      f.label = Label::kCamera;
      f.generator = "camera";
    } else {
      ++part;
      if (std::next(part) == rel.end()) {
        data.skipped.emplace_back(f.path, "directly in generated/: put it in generated/<generator>/");
        continue;
      }
      f.label = Label::kGenerated;
      f.generator = part->string();
    }
    data.files.push_back(std::move(f));
  }
  return data;
}

std::vector<std::string> split_csv(const std::string& line) {
  std::vector<std::string> fields(1);
  bool quoted = false;
  for (size_t i = 0; i < line.size(); ++i) {
    const char c = line[i];
    if (quoted) {
      if (c == '"' && i + 1 < line.size() && line[i + 1] == '"') {
        fields.back().push_back('"');
        ++i;
      } else if (c == '"') {
        quoted = false;
      } else {
        fields.back().push_back(c);
      }
    } else if (c == '"') {
      quoted = true;
    } else if (c == ',') {
      fields.emplace_back();
    } else if (c != '\r') {
      fields.back().push_back(c);
    }
  }
  return fields;
}

Result<Dataset> read_manifest(const fs::path& csv) {
  std::ifstream in(csv);
  if (!in) return make_error(ErrorCode::kUnreadable, "cannot open manifest " + csv.string());
  std::string line;
  if (!std::getline(in, line)) return make_error(ErrorCode::kEmpty, "manifest " + csv.string() + " is empty");
  const auto header = split_csv(line);
  auto column = [&](const char* name) {
    const auto it = std::find(header.begin(), header.end(), name);
    return it == header.end() ? -1 : static_cast<int>(it - header.begin());
  };
  const int c_path = column("path");
  const int c_label = column("label");
  const int c_generator = column("generator");
  const int c_group = column("group");
  if (c_path < 0 || c_label < 0) {
    return make_error(ErrorCode::kCorrupt, "manifest header must name at least the columns path,label");
  }
  Dataset data;
  int line_number = 1;
  while (std::getline(in, line)) {
    ++line_number;
    if (line.empty() || line == "\r") continue;
    const auto fields = split_csv(line);
    auto field = [&](int c) {
      return c >= 0 && c < static_cast<int>(fields.size()) ? fields[c] : std::string();
    };
    LabelledFile f;
    fs::path p = field(c_path);
    if (p.is_relative()) p = csv.parent_path() / p;
    f.path = p.string();
    f.folder = p.parent_path().string();
    const std::string label = field(c_label);
    if (label == "camera" || label == "0") {
      f.label = Label::kCamera;
      f.generator = "camera";
    } else if (label == "generated" || label == "1") {
      f.label = Label::kGenerated;
      f.generator = field(c_generator).empty() ? "unnamed" : field(c_generator);
    } else {
      data.skipped.emplace_back(f.path, "manifest line " + std::to_string(line_number) + ": label '" + label +
                                            "' is neither camera nor generated");
      continue;
    }
    f.group = field(c_group);
    data.files.push_back(std::move(f));
  }
  return data;
}

Result<Dataset> load_dataset(const fs::path& root_or_manifest) {
  std::error_code ec;
  if (fs::is_regular_file(root_or_manifest, ec)) return read_manifest(root_or_manifest);
  return scan_labelled_folders(root_or_manifest);
}

}  // namespace residue
