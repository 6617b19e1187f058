#include "daemon/common/iso_time.h"

#include <cctype>
#include <cstdio>
#include <cstdlib>

#include "monitors/period.h"

namespace forewarden {

std::string IsoTime(std::int64_t ms) {
  const std::int64_t days = ms >= 0 ? ms / 86400000 : -((-ms + 86399999) / 86400000);
  const std::int64_t in_day = ms - days * 86400000;
  int y = 0;
  int m = 0, d = 0;
  monitors::CivilFromDays(days, y, m, d);
  char buf[64];
  std::snprintf(buf, sizeof buf, "%04d-%02d-%02dT%02d:%02d:%02d.%03dZ", y, m, d,
                static_cast<int>(in_day / 3600000), static_cast<int>(in_day / 60000 % 60),
                static_cast<int>(in_day / 1000 % 60), static_cast<int>(in_day % 1000));
  return buf;
}

bool ParseIsoTime(const std::string& t, std::int64_t& ms) {
  int y = 0, mo = 0, d = 0, h = 0, mi = 0, sec = 0, n = 0;
  if (std::sscanf(t.c_str(), "%4d-%2d-%2dT%2d:%2d:%2d%n", &y, &mo, &d, &h, &mi, &sec, &n) != 6) {
    sec = 0;
    if (std::sscanf(t.c_str(), "%4d-%2d-%2dT%2d:%2d%n", &y, &mo, &d, &h, &mi, &n) != 5)
      return false;
  }
  std::string rest = t.substr(static_cast<std::size_t>(n));
  if (!rest.empty() && rest[0] == '.') {  // fractions of a second are ignored
    std::size_t k = 1;
    while (k < rest.size() && std::isdigit(static_cast<unsigned char>(rest[k]))) ++k;
    rest = rest.substr(k);
  }
  int offset = 0;
  if (rest == "Z") {
    offset = 0;
  } else if (rest.size() == 6 && (rest[0] == '+' || rest[0] == '-') && rest[3] == ':') {
    const int oh = std::atoi(rest.substr(1, 2).c_str()), om = std::atoi(rest.substr(4, 2).c_str());
    offset = (rest[0] == '-' ? -1 : 1) * (oh * 60 + om);
  } else {
    return false;
  }
  if (mo < 1 || mo > 12 || d < 1 || d > 31 || h > 23 || mi > 59 || sec > 60) return false;
  const std::int64_t days = monitors::DaysFromCivil(y, mo, d);
  ms = ((days * 24 + h) * 60 + mi - offset) * 60000LL + sec * 1000LL;
  return true;
}

}  // namespace forewarden
