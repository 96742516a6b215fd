#include "review_page.hpp"

#include "residue/detector/pages/evaluation_page.hpp"
#include "residue/detector/scoring/record.hpp"

namespace residue {

extern const char* const kReviewPageTemplate;  // review_page.html, compiled in by CMake

const std::string& review_page() {
  static const std::string page = [] {
    std::string p = kReviewPageTemplate;
    const std::string slot = "{{advisory}}";
    const auto at = p.find(slot);
    if (at != std::string::npos) p.replace(at, slot.size(), html_escape(kAdvisoryNotice));
    return p;
  }();
  return page;
}

}  // namespace residue
