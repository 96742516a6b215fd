// Everyday processing of uploads (transforms.hpp).
#include "residue/features/transforms.hpp"

#include <algorithm>
#include <cmath>
#include <cstdlib>
#include <optional>
#include <random>
#include <string_view>

#include "adapters.hpp"

namespace residue {

namespace {

Image scaled(const Image& image, double factor, detail::ResizeFilter filter) {
  const int w = std::max(1, static_cast<int>(std::lround(image.width * factor)));
  const int h = std::max(1, static_cast<int>(std::lround(image.height * factor)));
  return detail::resize(image, w, h, filter);
}

// Unsharp masking, the usual "sharpen": x + amount (x - gaussian(x, sigma)), clamped.
Image sharpened(const Image& image, double sigma, double amount) {
  const Image blurred = detail::gaussian_blur(image, sigma);
  Image out = image;
  for (size_t i = 0; i < out.samples.size(); ++i) {
    out.samples[i] =
        std::clamp(static_cast<float>(image.samples[i] + amount * (image.samples[i] - blurred.samples[i])),
                   0.0F, 255.0F);
  }
  return out;
}

// Additive zero-mean Gaussian noise of standard deviation `sigma`, clamped to 0..255. The draws come
// from a fixed seed, so a file always gets the same copy.
Image noisy(const Image& image, double sigma, std::uint32_t seed) {
  std::mt19937 random(seed);
  std::normal_distribution<float> draw(0.0F, static_cast<float>(sigma));
  Image out = image;
  for (auto& v : out.samples) v = std::clamp(v + draw(random), 0.0F, 255.0F);
  return out;
}

// 3 x 3 median of each channel (detail::median3: OpenCV's medianBlur, replicated borders).
Image median_filtered(const Image& image) {
  Image out = Image::zeros(image.width, image.height, image.channels);
  for (int c = 0; c < image.channels; ++c)
    detail::median3(image.plane(c), out.plane(c), image.width, image.height);
  return out;
}

// Display gamma on the 0..255 scale: 255 (v / 255)^(1 / gamma).
Image gamma_adjusted(const Image& image, double gamma) {
  Image out = image;
  for (auto& v : out.samples)
    v = static_cast<float>(255.0 * std::pow(std::clamp(v, 0.0F, 255.0F) / 255.0, 1.0 / gamma));
  return out;
}

// Encodes as JPEG and decodes again: a recompression step inside a chain.
Result<Image> through_jpeg(const Image& image, int quality, const DecodeLimits& limits) {
  auto bytes = encode_image(image, ImageFormat::kJpeg, quality);
  if (!bytes) return bytes.error();
  return decode_image(*bytes, limits);
}

Image as_rgb(const Image& image) {
  if (image.channels == 3) return image;
  Image out = Image::zeros(image.width, image.height, 3);
  for (int c = 0; c < 3; ++c) std::copy(image.samples.begin(), image.samples.end(), out.plane(c));
  return out;
}

}  // namespace

const std::vector<TransformInfo>& everyday_transforms() {
  static const std::vector<TransformInfo> t = {
      {"as-published", "the file as it is"},
      {"jpeg-q95", "recompressed as JPEG, quality 95 (IJG scale, 4:2:0)"},
      {"jpeg-q75", "recompressed as JPEG, quality 75"},
      {"jpeg-q50", "recompressed as JPEG, quality 50"},
      {"webp-q80", "converted to lossy WebP, quality 80"},
      {"downscale-0.5", "downscaled to half size (area filter), saved as PNG"},
      {"upscale-1.5", "upscaled 1.5 times (bicubic), saved as PNG"},
      {"palette-256", "quantised to 256 colours (median cut), saved as a palette PNG"},
      {"sharpen", "unsharp mask (sigma 1 px, amount 0.8), saved as PNG"},
      {"crop-centre-0.6", "centre 60 % of each side, saved as PNG"},
      {"screenshot-0.8", "rescaled to 0.8 (bilinear) as a screen capture would, saved as PNG"},
  };
  return t;
}

const std::vector<TransformInfo>& laundering_transforms() {
  static const std::vector<TransformInfo> t = {
      {"blur-1.5", "Gaussian blur, sigma 1.5 px, saved as PNG"},
      {"noise-4", "additive Gaussian noise, sigma 4 grey levels, saved as PNG"},
      {"median-3", "3 x 3 median filter (a denoiser), saved as PNG"},
      {"resize-chain", "downscaled to 0.6, JPEG 85, downscaled to 0.8, JPEG 80"},
      {"print-scan", "print-and-scan-like: blur sigma 1 px, gamma 1.2, noise sigma 3, saved as PNG"},
  };
  return t;
}

std::vector<TransformInfo> processing_transforms() {
  std::vector<TransformInfo> all = everyday_transforms();
  const auto& more = laundering_transforms();
  all.insert(all.end(), more.begin(), more.end());
  return all;
}

namespace {

// A parametrised name "PREFIX<number>" (e.g. "jpeg-q83", "downscale-0.72"): the number, if the
// name has the prefix and the rest is a number in [lo, hi].
std::optional<double> parameter(const std::string& name, std::string_view prefix, double lo, double hi) {
  if (!name.starts_with(prefix) || name.size() == prefix.size()) return std::nullopt;
  const std::string rest = name.substr(prefix.size());
  char* end = nullptr;
  const double v = std::strtod(rest.c_str(), &end);
  if (end != rest.c_str() + rest.size() || !(v >= lo && v <= hi)) return std::nullopt;
  return v;
}

}  // namespace

Result<std::vector<std::uint8_t>> apply_transform(std::span<const std::uint8_t> bytes,
                                                  const std::string& name, const DecodeLimits& limits) {
  if (name == "as-published") return std::vector<std::uint8_t>(bytes.begin(), bytes.end());
  const auto jpeg = parameter(name, "jpeg-q", 1, 100);
  const auto webp = parameter(name, "webp-q", 1, 100);
  const auto down = parameter(name, "downscale-", 0.05, 0.999);
  const auto cropped = parameter(name, "crop-centre-", 0.05, 0.999);
  const auto up = parameter(name, "upscale-", 1.001, 4.0);
  const auto blur = parameter(name, "blur-", 0.3, 5.0);
  const auto noise = parameter(name, "noise-", 0.5, 20.0);
  const auto named = [&](const std::vector<TransformInfo>& list) {
    return std::any_of(list.begin(), list.end(), [&](const TransformInfo& t) { return t.name == name; });
  };
  const bool known = named(everyday_transforms()) || named(laundering_transforms());
  if (!known && !jpeg && !webp && !down && !up && !cropped && !blur && !noise)
    return make_error(ErrorCode::kUnsupported, "unknown transform '" + name + "'");
  auto decoded = decode_image(bytes, limits);
  if (!decoded) return decoded.error();
  const Image& image = *decoded;
  using detail::ResizeFilter;
  if (jpeg) return encode_image(image, ImageFormat::kJpeg, static_cast<int>(*jpeg));
  if (webp) return encode_image(image, ImageFormat::kWebp, static_cast<int>(*webp));
  if (down) return encode_image(scaled(image, *down, ResizeFilter::kArea), ImageFormat::kPng);
  if (cropped) {
    const int w = std::max(1, static_cast<int>(image.width * *cropped));
    const int h = std::max(1, static_cast<int>(image.height * *cropped));
    return encode_image(crop(image, (image.width - w) / 2, (image.height - h) / 2, w, h), ImageFormat::kPng);
  }
  if (up) return encode_image(scaled(image, *up, ResizeFilter::kBicubic), ImageFormat::kPng);
  if (name == "sharpen") return encode_image(sharpened(image, 1.0, 0.8), ImageFormat::kPng);
  if (name == "screenshot-0.8")
    return encode_image(scaled(image, 0.8, ResizeFilter::kBilinear), ImageFormat::kPng);
  if (blur) return encode_image(detail::gaussian_blur(image, *blur), ImageFormat::kPng);
  if (noise) return encode_image(noisy(image, *noise, 4), ImageFormat::kPng);
  if (name == "median-3") return encode_image(median_filtered(image), ImageFormat::kPng);
  if (name == "resize-chain") {
    auto first = through_jpeg(scaled(image, 0.6, ResizeFilter::kArea), 85, limits);
    if (!first) return first.error();
    return encode_image(scaled(*first, 0.8, ResizeFilter::kArea), ImageFormat::kJpeg, 80);
  }
  if (name == "print-scan") {
    return encode_image(noisy(gamma_adjusted(detail::gaussian_blur(image, 1.0), 1.2), 3.0, 3),
                        ImageFormat::kPng);
  }
  // palette-256
  const Image rgb = as_rgb(image);
  const Quantised q = median_cut(rgb, 256);
  return detail::encode_palette_png(rgb.width, rgb.height, q.indices, q.palette);
}

Quantised median_cut(const Image& image, int colours) {
  const size_t n = static_cast<size_t>(image.width) * image.height;
  auto value = [&](size_t pixel, int c) {
    return static_cast<std::uint8_t>(std::clamp(std::lround(image.plane(c)[pixel]), 0L, 255L));
  };
  std::vector<std::array<std::uint8_t, 3>> pixels(n);
  for (size_t i = 0; i < n; ++i) pixels[i] = {value(i, 0), value(i, 1), value(i, 2)};
  std::vector<std::uint32_t> order(n);
  for (size_t i = 0; i < n; ++i) order[i] = static_cast<std::uint32_t>(i);
  struct Box {
    size_t begin, end;
    int channel;  // the longest side
    int range;    // its extent (0: cannot be split)
  };
  auto make_box = [&](size_t begin, size_t end) {
    std::array<int, 3> lo{255, 255, 255}, hi{0, 0, 0};
    for (size_t k = begin; k < end; ++k) {
      for (size_t c = 0; c < 3; ++c) {
        lo[c] = std::min<int>(lo[c], pixels[order[k]][c]);
        hi[c] = std::max<int>(hi[c], pixels[order[k]][c]);
      }
    }
    Box b{begin, end, 0, 0};
    for (int c = 0; c < 3; ++c) {
      const int r = hi[static_cast<size_t>(c)] - lo[static_cast<size_t>(c)];
      if (r > b.range) b = {begin, end, c, r};
    }
    return b;
  };
  std::vector<Box> boxes = {make_box(0, n)};
  while (static_cast<int>(boxes.size()) < colours) {
    // The most populous box that still spans more than one value.
    int pick = -1;
    for (size_t b = 0; b < boxes.size(); ++b) {
      if (boxes[b].range == 0) continue;
      if (pick < 0 || boxes[b].end - boxes[b].begin >
                          boxes[static_cast<size_t>(pick)].end - boxes[static_cast<size_t>(pick)].begin) {
        pick = static_cast<int>(b);
      }
    }
    if (pick < 0) break;
    const Box box = boxes[static_cast<size_t>(pick)];
    const size_t mid = box.begin + (box.end - box.begin) / 2;
    const auto channel = static_cast<size_t>(box.channel);
    auto less = [&](std::uint32_t a, std::uint32_t b) { return pixels[a][channel] < pixels[b][channel]; };
    std::nth_element(order.begin() + static_cast<std::ptrdiff_t>(box.begin),
                     order.begin() + static_cast<std::ptrdiff_t>(mid),
                     order.begin() + static_cast<std::ptrdiff_t>(box.end), less);
    boxes[static_cast<size_t>(pick)] = make_box(box.begin, mid);
    boxes.push_back(make_box(mid, box.end));
  }
  Quantised q;
  q.indices.resize(n);
  for (size_t b = 0; b < boxes.size(); ++b) {
    std::array<double, 3> sum{0, 0, 0};
    for (size_t k = boxes[b].begin; k < boxes[b].end; ++k) {
      for (int c = 0; c < 3; ++c) sum[static_cast<size_t>(c)] += pixels[order[k]][static_cast<size_t>(c)];
      q.indices[order[k]] = static_cast<std::uint8_t>(b);
    }
    const double count = static_cast<double>(std::max<size_t>(1, boxes[b].end - boxes[b].begin));
    q.palette.push_back({static_cast<std::uint8_t>(std::lround(sum[0] / count)),
                         static_cast<std::uint8_t>(std::lround(sum[1] / count)),
                         static_cast<std::uint8_t>(std::lround(sum[2] / count))});
  }
  return q;
}

}  // namespace residue
