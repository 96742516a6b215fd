#include "uploads.hpp"

#include <cstdlib>
#include <stdexcept>

#include "connection_guard.hpp"
#include "routes.hpp"

namespace residue {

std::optional<std::string> read_upload(const httplib::Request& req, httplib::Response& res,
                                       const httplib::ContentReader& content_reader,
                                       std::size_t max_body_bytes) {
  // The body is read here rather than by the HTTP library, so that it is taken as image bytes
  // whatever its declared type (curl --data-binary declares a form) and a chunked body is held to
  // the same size limit.
  std::string body;
  if (req.has_header("Content-Length")) {  // no doubling reallocations for a large upload
    body.reserve(std::min<std::size_t>(
        std::strtoull(req.get_header_value("Content-Length").c_str(), nullptr, 10), max_body_bytes));
  }
  size_t parts = 0;
  bool too_large = false;
  const auto append = [&](const char* data, size_t n) {
    if (body.size() + n > max_body_bytes) {
      too_large = true;
      return false;
    }
    body.append(data, n);
    return true;
  };
  const bool read =
      req.is_multipart_form_data()
          ? content_reader([&](const httplib::MultipartFormData&) { return ++parts == 1; }, append)
          : content_reader(append);
  connection_working();
  if (too_large || (!read && res.status == 413)) {
    res.set_header("Connection", "close");
    reply(res, 413,
          error_body("too-large", "the request body is over the size limit of " +
                                      std::to_string(max_body_bytes) + " bytes"));
    return std::nullopt;
  }
  if (req.is_multipart_form_data() && parts != 1) {
    reply(res, 400, error_body("bad-request", "a multipart upload must carry exactly one file"));
    return std::nullopt;
  }
  if (body.empty()) {  // also a body that never came (Content-Length: 0)
    reply(res, 400, error_body("empty", "the request body is empty: send the image bytes"));
    return std::nullopt;
  }
  if (!read) {
    reply(res, 400, error_body("bad-request", "the request body could not be read"));
    return std::nullopt;
  }
  return body;
}

std::optional<ScanSettings> request_settings(const httplib::Request& req, httplib::Response& res,
                                             const ScanSettings& base) {
  ScanSettings settings = base;
  if (!req.has_param("prior")) return settings;
  try {
    const double prior = std::stod(req.get_param_value("prior"));
    if (!(prior > 0.0 && prior < 1.0)) throw std::invalid_argument("range");
    settings.prior = prior;
  } catch (const std::exception&) {
    reply(res, 400, error_body("bad-request", "prior must be a number strictly between 0 and 1"));
    return std::nullopt;
  }
  return settings;
}

std::string upload_name(const httplib::Request& req) {
  return req.get_param_value("name").empty() ? std::string("-") : req.get_param_value("name");
}

std::span<const std::uint8_t> as_bytes(const std::string& body) {
  return {reinterpret_cast<const std::uint8_t*>(body.data()), body.size()};
}

}  // namespace residue
