// Binary encoding of one series' monitor state for the store (little-endian, versioned).
// Round-trips every field exactly (doubles bit for bit), so a restart resumes with the same
// state an uninterrupted run would have. Pure functions.
#pragma once

#include <string>
#include <string_view>

#include "monitors/series.h"

namespace forewarden {

std::string EncodeState(const monitors::SeriesState& state);

// False (state untouched) when the bytes are not a state of a known version.
bool DecodeState(std::string_view bytes, monitors::SeriesState& state);

}  // namespace forewarden
