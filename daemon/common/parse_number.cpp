#include "daemon/common/parse_number.h"

#include <charconv>
#include <cmath>
#include <string>

namespace forewarden {

bool ParseNumber(std::string_view text, double& out) {
  if (text.empty()) return false;
  const char* first = text.data();
  if (*first == '+') ++first;
  auto r = std::from_chars(first, text.data() + text.size(), out);
  return r.ec == std::errc() && r.ptr == text.data() + text.size() && std::isfinite(out);
}

Result<std::int64_t> ParseWholeNumber(std::string_view text, std::int64_t lo, std::int64_t hi) {
  const std::string range = std::to_string(lo) + ".." + std::to_string(hi);
  std::int64_t v = 0;
  auto r = std::from_chars(text.data(), text.data() + text.size(), v);
  if (text.empty() || r.ptr != text.data() + text.size() ||
      (r.ec != std::errc() && r.ec != std::errc::result_out_of_range))
    return Status::Invalid("'" + std::string(text.substr(0, 40)) + "' is not a whole number (" +
                           range + ")");
  if (r.ec == std::errc::result_out_of_range || v < lo || v > hi)
    return Status::Invalid(std::string(text.substr(0, 40)) + " is outside " + range);
  return v;
}

}  // namespace forewarden
