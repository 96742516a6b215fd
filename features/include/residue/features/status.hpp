// Errors as values: a typed error code with a message, and Result<T> = value or error.
#pragma once

#include <string>
#include <string_view>
#include <utility>
#include <variant>

namespace residue {

// Every way an input can fail. The string form (error_code_name) is part of the record contract.
enum class ErrorCode {
  kUnreadable,   // the file could not be opened or read
  kEmpty,        // zero bytes
  kTruncated,    // the data ends before the image does
  kNotAnImage,   // no known image signature
  kUnsupported,  // an image, but a kind we do not analyse (e.g. CMYK JPEG, 32-bit float TIFF)
  kCorrupt,      // an image signature, but the decoder rejected the data
  kTooLarge,     // file size or pixel count over the configured limit
  kTooSmall,     // smaller than the smallest analysis window
  kInternal,     // a bug or resource failure on our side
};

std::string_view error_code_name(ErrorCode code);

struct Error {
  ErrorCode code = ErrorCode::kInternal;
  std::string message;
};

template <typename T>
class [[nodiscard]] Result {
 public:
  Result(T value) : data_(std::move(value)) {}      // NOLINT(google-explicit-constructor)
  Result(Error error) : data_(std::move(error)) {}  // NOLINT(google-explicit-constructor)

  [[nodiscard]] bool ok() const { return std::holds_alternative<T>(data_); }
  explicit operator bool() const { return ok(); }
  T& value() & { return std::get<T>(data_); }
  const T& value() const& { return std::get<T>(data_); }
  T&& value() && { return std::get<T>(std::move(data_)); }
  T* operator->() { return &value(); }
  const T* operator->() const { return &value(); }
  T& operator*() & { return value(); }
  const T& operator*() const& { return value(); }
  [[nodiscard]] const Error& error() const { return std::get<Error>(data_); }

 private:
  std::variant<T, Error> data_;
};

inline Error make_error(ErrorCode code, std::string message) { return Error{code, std::move(message)}; }

}  // namespace residue
