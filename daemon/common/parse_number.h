// Numbers from text, parsed whole: "12abc", "1e3" for a whole number, "4294967297" for a value
// beyond its range are refused, never truncated or read in part.
#pragma once

#include <cstdint>
#include <string_view>

#include "daemon/common/status.h"

namespace forewarden {

// A finite number in plain decimal or exponent notation (a leading '+' allowed).
bool ParseNumber(std::string_view text, double& out);
// The same, telling a number that is not finite (nan, inf, 1e999) from text that is no number.
enum class NumberText { kFinite, kNotFinite, kNotANumber };
NumberText ReadNumber(std::string_view text, double& out);

// A whole number in [lo, hi], decimal digits with an optional leading '-'. The message says
// what was wrong and the range.
Result<std::int64_t> ParseWholeNumber(std::string_view text, std::int64_t lo, std::int64_t hi);

}  // namespace forewarden
