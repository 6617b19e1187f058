// ISO 8601 UTC times for the API and notifications.
#pragma once

#include <cstdint>
#include <string>

namespace forewarden {

// "2026-12-02T01:42:34.123Z" from milliseconds since the Unix epoch.
std::string IsoTime(std::int64_t ms);

// "2026-12-05T10:00:00Z", "2026-12-05T10:00Z" or with a +hh:mm / -hh:mm offset (fractions of
// a second ignored) as milliseconds since the epoch; false when it is not such a time.
bool ParseIsoTime(const std::string& text, std::int64_t& ms);

}  // namespace forewarden
