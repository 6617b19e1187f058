#include "daemon/common/parse_number.h"

#include <charconv>
#include <cmath>
#include <cstdlib>
#include <string>

namespace forewarden {

NumberText ReadNumber(std::string_view text, double& out) {
  if (text.empty()) return NumberText::kNotANumber;
  const char* first = text.data();
  if (*first == '+') ++first;
  auto r = std::from_chars(first, text.data() + text.size(), out);
  if (r.ptr != text.data() + text.size()) return NumberText::kNotANumber;
  if (r.ec == std::errc::result_out_of_range) {
    // beyond the doubles (1e999: +/-inf) or below them (1e-999: 0); strtod tells which
    out = std::strtod(std::string(text).c_str(), nullptr);
    return std::isfinite(out) ? NumberText::kFinite : NumberText::kNotFinite;
  }
  if (r.ec != std::errc()) return NumberText::kNotANumber;
  return std::isfinite(out) ? NumberText::kFinite : NumberText::kNotFinite;
}

bool ParseNumber(std::string_view text, double& out) {
  return ReadNumber(text, out) == NumberText::kFinite;
}

Result<std::int64_t> ParseWholeNumber(std::string_view text, std::int64_t lo, std::int64_t hi) {
  auto range = [&] { return std::to_string(lo) + ".." + std::to_string(hi); };
  std::int64_t v = 0;
  auto r = std::from_chars(text.data(), text.data() + text.size(), v);
  if (text.empty() || r.ptr != text.data() + text.size() ||
      (r.ec != std::errc() && r.ec != std::errc::result_out_of_range))
    return Status::Invalid("'" + std::string(text.substr(0, 40)) + "' is not a whole number (" +
                           range() + ")");
  if (r.ec == std::errc::result_out_of_range || v < lo || v > hi)
    return Status::Invalid(std::string(text.substr(0, 40)) + " is outside " + range());
  return v;
}

}  // namespace forewarden
