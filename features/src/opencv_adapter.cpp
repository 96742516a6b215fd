// OpenCV adapter: decoding of the non-JPEG formats and the 3 x 3 median filter.
#include <opencv2/core.hpp>
#include <opencv2/imgcodecs.hpp>
#include <opencv2/imgproc.hpp>
#include <string>

#include "adapters.hpp"

namespace residue::detail {

namespace {

bool png_has_end(std::span<const std::uint8_t> b) {
  static constexpr std::uint8_t kIend[] = {'I', 'E', 'N', 'D', 0xAE, 0x42, 0x60, 0x82};
  return b.size() >= 12 && std::equal(std::begin(kIend), std::end(kIend), b.end() - 8);
}

}  // namespace

Result<std::size_t> decode_plain_8bit(std::span<const std::uint8_t> bytes) {
  cv::Mat mat;
  try {
    const cv::Mat raw(1, static_cast<int>(bytes.size()), CV_8UC1, const_cast<std::uint8_t*>(bytes.data()));
    mat = cv::imdecode(raw, cv::IMREAD_COLOR);
  } catch (const cv::Exception& e) {
    return make_error(ErrorCode::kCorrupt, std::string("decoder: ") + e.what());
  }
  if (mat.empty()) return make_error(ErrorCode::kCorrupt, "the decoder rejected the data");
  return mat.total() * mat.elemSize();
}

Result<Image> decode_with_opencv(std::span<const std::uint8_t> bytes, const ImageHeader& header,
                                 bool* alpha_dropped) {
  cv::Mat mat;
  try {
    const cv::Mat raw(1, static_cast<int>(bytes.size()), CV_8UC1, const_cast<std::uint8_t*>(bytes.data()));
    mat = cv::imdecode(raw, cv::IMREAD_UNCHANGED);
  } catch (const cv::Exception& e) {
    return make_error(ErrorCode::kCorrupt, std::string("decoder: ") + e.what());
  }
  const std::string format(image_format_name(header.format));
  if (mat.empty()) {
    if (header.format == ImageFormat::kPng && !png_has_end(bytes)) {
      return make_error(ErrorCode::kTruncated, "PNG data ends before the image does (no IEND chunk)");
    }
    return make_error(ErrorCode::kCorrupt, "the " + format + " decoder rejected the data");
  }
  double scale = 1.0;
  if (mat.depth() == CV_16U) {
    scale = 1.0 / 257.0;  // 65535 -> 255
  } else if (mat.depth() != CV_8U) {
    return make_error(ErrorCode::kUnsupported,
                      format + " with floating-point or 32-bit samples is not analysed");
  }
  const int stored = mat.channels();
  *alpha_dropped = stored == 2 || stored == 4;
  const int channels = stored >= 3 ? 3 : 1;
  std::vector<cv::Mat> split;
  cv::split(mat, split);
  Image image = Image::zeros(mat.cols, mat.rows, channels);
  for (int c = 0; c < channels; ++c) {
    // OpenCV orders colour as B, G, R; ours is R, G, B.
    const cv::Mat& src = split[channels == 3 ? 2 - c : 0];
    cv::Mat dst(mat.rows, mat.cols, CV_32F, image.plane(c));
    src.convertTo(dst, CV_32F, scale);
  }
  return image;
}

Result<std::vector<std::uint8_t>> encode(const Image& image, ImageFormat format, int quality) {
  std::vector<cv::Mat> planes;
  for (int c = image.channels - 1; c >= 0; --c) {  // R, G, B -> B, G, R
    cv::Mat plane;
    cv::Mat(image.height, image.width, CV_32F, const_cast<float*>(image.plane(c))).convertTo(plane, CV_8U);
    planes.push_back(plane);
  }
  cv::Mat mat;
  cv::merge(planes, mat);
  std::vector<std::uint8_t> out;
  try {
    if (format == ImageFormat::kJpeg) {
      cv::imencode(".jpg", mat, out, {cv::IMWRITE_JPEG_QUALITY, quality});
    } else if (format == ImageFormat::kPng) {
      cv::imencode(".png", mat, out, {cv::IMWRITE_PNG_COMPRESSION, 3});
    } else if (format == ImageFormat::kWebp) {
      cv::imencode(".webp", mat, out, {cv::IMWRITE_WEBP_QUALITY, quality});  // lossy below 100
    } else {
      return make_error(ErrorCode::kUnsupported, "encoding is offered for JPEG, PNG and WebP only");
    }
  } catch (const cv::Exception& e) {
    return make_error(ErrorCode::kInternal, std::string("encoder: ") + e.what());
  }
  return out;
}

Image resize(const Image& image, int width, int height, ResizeFilter filter) {
  const int interpolation = filter == ResizeFilter::kArea      ? cv::INTER_AREA
                            : filter == ResizeFilter::kBicubic ? cv::INTER_CUBIC
                                                               : cv::INTER_LINEAR;
  Image out = Image::zeros(width, height, image.channels);
  for (int c = 0; c < image.channels; ++c) {
    const cv::Mat in(image.height, image.width, CV_32F, const_cast<float*>(image.plane(c)));
    cv::Mat dst(height, width, CV_32F, out.plane(c));
    cv::resize(in, dst, cv::Size(width, height), 0, 0, interpolation);
  }
  return out;
}

Image gaussian_blur(const Image& image, double sigma) {
  Image out = Image::zeros(image.width, image.height, image.channels);
  for (int c = 0; c < image.channels; ++c) {
    const cv::Mat in(image.height, image.width, CV_32F, const_cast<float*>(image.plane(c)));
    cv::Mat dst(image.height, image.width, CV_32F, out.plane(c));
    cv::GaussianBlur(in, dst, cv::Size(0, 0), sigma, sigma, cv::BORDER_REFLECT_101);
  }
  return out;
}

void median3(const float* src, float* dst, int width, int height) {
  const cv::Mat in(height, width, CV_32F, const_cast<float*>(src));
  cv::Mat out(height, width, CV_32F, dst);
  cv::medianBlur(in, out, 3);
}

}  // namespace residue::detail
