// Test helpers: sample photographs, a scratch folder, and running the Python reference scripts.
#pragma once

#include <filesystem>
#include <string>
#include <vector>

#include "residue/features/image.hpp"

namespace residue::test {

// scikit-image's sample image `name` (python3-skimage, public domain / CC0 photographs).
std::filesystem::path sample(const std::string& name);

// A scratch folder for this test process, removed at exit.
std::filesystem::path scratch();

// Runs tests/reference/<script> with Debian's /usr/bin/python3 and returns its stdout.
// Fails the test (throws) when the script exits non-zero.
std::string python(const std::string& script, const std::vector<std::string>& args);

// A file's bytes (fails the test on error).
std::vector<std::uint8_t> file_bytes(const std::filesystem::path& path);

// A whole image decoded by OpenCV's imdecode (IMREAD_UNCHANGED), alpha dropped, channels as R, G, B,
// 16-bit samples divided by 257: the outside reference the decoders are checked against (throws
// when OpenCV cannot decode it).
Image opencv_reference(const std::vector<std::uint8_t>& bytes);

// Decodes a file completely (fails the test on error).
Image load(const std::filesystem::path& path);

// A grey image from its luma.
Image grey_of(const Image& image);

// Raw little-endian float32 files, row-major, as numpy.fromfile reads them.
void write_floats(const std::filesystem::path& path, const std::vector<float>& values);
std::vector<float> read_floats(const std::filesystem::path& path);

// The whitespace-separated numbers of a reference script's output.
std::vector<double> numbers(const std::string& text);

// Writes bytes to a file.
void write_bytes(const std::filesystem::path& path, const std::vector<std::uint8_t>& bytes);

}  // namespace residue::test
