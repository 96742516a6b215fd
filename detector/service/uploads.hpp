// What a scoring request carries: the image bytes (read as bytes whatever their declared type, one
// file in a multipart form, held to the size limit), its `prior` and its `name`. Each reader
// answers the error itself and gives nothing when the request cannot be scored.
#pragma once

#include <httplib.h>

#include <cstddef>
#include <cstdint>
#include <optional>
#include <span>
#include <string>

#include "residue/detector/scoring/scan.hpp"

namespace residue {

// The upload's bytes, or nothing after answering 400 (empty, unreadable, a form with other than
// one file) or 413 (over `max_body_bytes`, chunked bodies included).
std::optional<std::string> read_upload(const httplib::Request& req, httplib::Response& res,
                                       const httplib::ContentReader& content_reader,
                                       std::size_t max_body_bytes);

// `base` with the request's `prior`, or nothing after answering 400 (not a number in (0, 1)).
std::optional<ScanSettings> request_settings(const httplib::Request& req, httplib::Response& res,
                                             const ScanSettings& base);

// The `name` the client gave the upload, "-" when none.
std::string upload_name(const httplib::Request& req);

std::span<const std::uint8_t> as_bytes(const std::string& body);

}  // namespace residue
