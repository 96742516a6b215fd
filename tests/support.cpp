#include "support.hpp"

#include <unistd.h>

#include <cstdio>
#include <fstream>
#include <opencv2/core.hpp>
#include <opencv2/imgcodecs.hpp>
#include <sstream>
#include <stdexcept>

#include "residue/features/decode.hpp"

namespace residue::test {

namespace {

struct Scratch {
  std::filesystem::path path;
  Scratch() {
    path = std::filesystem::temp_directory_path() / ("residue-tests-" + std::to_string(::getpid()));
    std::filesystem::create_directories(path);
  }
  ~Scratch() {
    std::error_code ec;
    std::filesystem::remove_all(path, ec);
  }
};

std::string quote(const std::string& s) {
  std::string q = "'";
  for (char c : s) {
    if (c == '\'') {
      q.append("'\\''");
    } else {
      q.push_back(c);
    }
  }
  q.push_back('\'');
  return q;
}

}  // namespace

std::filesystem::path sample(const std::string& name) {
  return std::filesystem::path(RESIDUE_SAMPLES) / name;
}

std::filesystem::path scratch() {
  static Scratch s;
  return s.path;
}

std::string python(const std::string& script, const std::vector<std::string>& args) {
  std::string cmd =
      std::string(RESIDUE_PYTHON) + " " + quote(std::string(RESIDUE_REFERENCE_DIR) + "/" + script);
  for (const auto& a : args) {
    cmd.push_back(' ');
    cmd.append(quote(a));
  }
  FILE* pipe = ::popen(cmd.c_str(), "r");
  if (pipe == nullptr) throw std::runtime_error("cannot run " + cmd);
  std::string out;
  char buf[4096];
  size_t n = 0;
  while ((n = std::fread(buf, 1, sizeof buf, pipe)) > 0) out.append(buf, n);
  if (::pclose(pipe) != 0) throw std::runtime_error("reference script failed: " + cmd);
  return out;
}

std::vector<std::uint8_t> file_bytes(const std::filesystem::path& path) {
  auto bytes = read_file(path);
  if (!bytes) throw std::runtime_error(path.string() + ": " + bytes.error().message);
  return std::move(bytes).value();
}

Image opencv_reference(const std::vector<std::uint8_t>& bytes) {
  const cv::Mat raw(1, static_cast<int>(bytes.size()), CV_8UC1, const_cast<std::uint8_t*>(bytes.data()));
  const cv::Mat mat = cv::imdecode(raw, cv::IMREAD_UNCHANGED);
  if (mat.empty()) throw std::runtime_error("OpenCV could not decode the reference image");
  const int channels = mat.channels() >= 3 ? 3 : 1;
  std::vector<cv::Mat> split;
  cv::split(mat, split);
  Image image = Image::zeros(mat.cols, mat.rows, channels);
  for (int c = 0; c < channels; ++c) {
    cv::Mat dst(mat.rows, mat.cols, CV_32F, image.plane(c));
    split[static_cast<size_t>(channels == 3 ? 2 - c : 0)].convertTo(
        dst, CV_32F, mat.depth() == CV_16U ? 1.0 / 257.0 : 1.0);
  }
  return image;
}

Image load(const std::filesystem::path& path) {
  auto image = decode_image(file_bytes(path));
  if (!image) throw std::runtime_error(path.string() + ": " + image.error().message);
  return std::move(image).value();
}

Image grey_of(const Image& image) { return Image{image.width, image.height, 1, luma(image)}; }

void write_floats(const std::filesystem::path& path, const std::vector<float>& values) {
  std::ofstream(path, std::ios::binary)
      .write(reinterpret_cast<const char*>(values.data()),
             static_cast<std::streamsize>(values.size() * sizeof(float)));
}

std::vector<double> numbers(const std::string& text) {
  std::stringstream ss(text);
  std::vector<double> v;
  double x = 0;
  while (ss >> x) v.push_back(x);
  return v;
}

std::vector<float> read_floats(const std::filesystem::path& path) {
  std::ifstream in(path, std::ios::binary | std::ios::ate);
  const auto size = static_cast<size_t>(in.tellg());
  std::vector<float> v(size / sizeof(float));
  in.seekg(0);
  in.read(reinterpret_cast<char*>(v.data()), static_cast<std::streamsize>(v.size() * sizeof(float)));
  return v;
}

void write_bytes(const std::filesystem::path& path, const std::vector<std::uint8_t>& bytes) {
  std::ofstream(path, std::ios::binary)
      .write(reinterpret_cast<const char*>(bytes.data()), static_cast<std::streamsize>(bytes.size()));
}

}  // namespace residue::test
