// Labelled datasets: ROOT/camera/** and ROOT/generated/<generator>/**, or a CSV manifest.
#pragma once

#include <filesystem>
#include <string>
#include <vector>

#include "residue/features/status.hpp"

namespace residue {

enum class Label { kCamera = 0, kGenerated = 1 };

struct LabelledFile {
  std::string path;
  Label label = Label::kCamera;
  std::string generator;  // "camera" for camera files; the folder (or manifest) name otherwise
  std::string group;      // from a manifest; empty when not given
  std::string folder;     // the file's folder relative to ROOT (for --group-by folder)
};

struct Dataset {
  std::vector<LabelledFile> files;
  std::vector<std::pair<std::string, std::string>> skipped;  // (path, reason)
};

// Walks ROOT/camera (any depth) and ROOT/generated/<generator> (any depth below the generator
// folder). Files directly in ROOT/generated have no generator and are skipped with a reason.
// Order is sorted by path, so runs are reproducible.
Result<Dataset> scan_labelled_folders(const std::filesystem::path& root);

// Reads a CSV manifest with a header row: path,label[,generator[,group]]. label is "camera" or
// "generated" (also 0/1); relative paths are taken from the manifest's folder. Quoted fields
// (RFC 4180) are accepted.
Result<Dataset> read_manifest(const std::filesystem::path& csv);

// Splits one CSV line (RFC 4180 quoting; no embedded newlines).
std::vector<std::string> split_csv(const std::string& line);

// A folder is scanned; a file is read as a manifest.
Result<Dataset> load_dataset(const std::filesystem::path& root_or_manifest);

}  // namespace residue
