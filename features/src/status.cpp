#include "residue/features/status.hpp"

namespace residue {

std::string_view error_code_name(ErrorCode code) {
  switch (code) {
    case ErrorCode::kUnreadable:
      return "unreadable";
    case ErrorCode::kEmpty:
      return "empty";
    case ErrorCode::kTruncated:
      return "truncated";
    case ErrorCode::kNotAnImage:
      return "not-an-image";
    case ErrorCode::kUnsupported:
      return "unsupported";
    case ErrorCode::kCorrupt:
      return "corrupt";
    case ErrorCode::kTooLarge:
      return "too-large";
    case ErrorCode::kTooSmall:
      return "too-small";
    case ErrorCode::kInternal:
      return "internal";
  }
  return "internal";
}

}  // namespace residue
