#include "monitors/period.h"

#include <charconv>

namespace monitors {
namespace {

constexpr std::int64_t kMondayBefore1970 = -3;  // 1969-12-29 in days since 1970-01-01

bool ParseDigits(std::string_view text, int& out) {
  if (text.empty()) return false;
  for (char c : text)
    if (c < '0' || c > '9') return false;
  auto res = std::from_chars(text.data(), text.data() + text.size(), out);
  return res.ec == std::errc() && res.ptr == text.data() + text.size();
}

const char* const kMonthNames[] = {"January",   "February", "March",    "April",
                                   "May",       "June",     "July",     "August",
                                   "September", "October",  "November", "December"};

bool IsLeap(int y) {
  return (y % 4 == 0 && y % 100 != 0) || y % 400 == 0;
}

// Monday (days since epoch) of ISO week 1 of an ISO year: the week holding January 4th.
std::int64_t IsoWeekOneMonday(int iso_year) {
  std::int64_t jan4 = DaysFromCivil(iso_year, 1, 4);
  std::int64_t weekday = ((jan4 - kMondayBefore1970) % 7 + 7) % 7;  // 0 = Monday
  return jan4 - weekday;
}

PeriodOrdinal WeekOrdinalOfDay(std::int64_t days) {
  std::int64_t since = days - kMondayBefore1970;
  return since >= 0 ? since / 7 : -((-since + 6) / 7);
}

PeriodParse Fail(std::string message) {
  PeriodParse p;
  p.error = std::move(message);
  return p;
}

}  // namespace

std::string_view PeriodKindName(PeriodKind kind) {
  switch (kind) {
    case PeriodKind::kDay:
      return "day";
    case PeriodKind::kWeek:
      return "week";
    case PeriodKind::kMonth:
      return "month";
  }
  return "?";
}

std::optional<PeriodKind> ParsePeriodKind(std::string_view text) {
  if (text == "day") return PeriodKind::kDay;
  if (text == "week") return PeriodKind::kWeek;
  if (text == "month") return PeriodKind::kMonth;
  return std::nullopt;
}

// Howard Hinnant's days_from_civil / civil_from_days algorithms (public domain,
// "chrono-Compatible Low-Level Date Algorithms").
std::int64_t DaysFromCivil(int y, int m, int d) {
  y -= m <= 2;
  const std::int64_t era = (y >= 0 ? y : y - 399) / 400;
  const unsigned yoe = static_cast<unsigned>(y - era * 400);
  const unsigned doy = (153u * (m > 2 ? m - 3 : m + 9) + 2) / 5 + d - 1;
  const unsigned doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
  return era * 146097 + static_cast<std::int64_t>(doe) - 719468;
}

void CivilFromDays(std::int64_t z, int& year, int& month, int& day) {
  z += 719468;
  const std::int64_t era = (z >= 0 ? z : z - 146096) / 146097;
  const unsigned doe = static_cast<unsigned>(z - era * 146097);
  const unsigned yoe = (doe - doe / 1460 + doe / 36524 - doe / 146096) / 365;
  const std::int64_t y = static_cast<std::int64_t>(yoe) + era * 400;
  const unsigned doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
  const unsigned mp = (5 * doy + 2) / 153;
  day = static_cast<int>(doy - (153 * mp + 2) / 5 + 1);
  month = static_cast<int>(mp < 10 ? mp + 3 : mp - 9);
  year = static_cast<int>(y + (month <= 2));
}

int DaysInMonth(int year, int month) {
  static const int kDays[] = {31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31};
  return month == 2 && IsLeap(year) ? 29 : kDays[month - 1];
}

PeriodParse ParsePeriod(PeriodKind kind, std::string_view text) {
  const std::string shown(text);
  if (text.size() < 7 || text[4] != '-')
    return Fail("'" + shown + "' is not a period: expected YYYY-MM-DD" +
                (kind == PeriodKind::kWeek    ? std::string(" or YYYY-Www")
                 : kind == PeriodKind::kMonth ? std::string(" or YYYY-MM")
                                              : std::string()));
  int year = 0;
  if (!ParseDigits(text.substr(0, 4), year) || year < kFirstYear || year > kLastYear)
    return Fail("'" + shown + "' is not a period: the year must be " + std::to_string(kFirstYear) +
                "-" + std::to_string(kLastYear) + " (the periods forewarden takes)");

  // YYYY-Www
  if (text.size() == 8 && (text[5] == 'W' || text[5] == 'w')) {
    if (kind != PeriodKind::kWeek)
      return Fail("'" + shown + "' is an ISO week, but the policy's period is " +
                  std::string(PeriodKindName(kind)));
    int week = 0;
    if (!ParseDigits(text.substr(6, 2), week) || week < 1)
      return Fail("'" + shown + "' is not an ISO week: the week number must be 01-53");
    std::int64_t monday = IsoWeekOneMonday(year) + 7LL * (week - 1);
    if (week == 53 && IsoWeekOneMonday(year + 1) <= monday)
      return Fail("'" + shown + "' is not an ISO week: " + std::to_string(year) +
                  " has 52 ISO weeks");
    if (week > 53) return Fail("'" + shown + "' is not an ISO week: the week number must be 01-53");
    PeriodParse p;
    p.ordinal = WeekOrdinalOfDay(monday);
    return p;
  }

  int month = 0;
  if (!ParseDigits(text.substr(5, 2), month))
    return Fail("'" + shown + "' is not a period: expected YYYY-MM-DD");
  if (month < 1 || month > 12)
    return Fail("'" + shown + "' is not a date: the month must be 01-12");

  int day = 1;
  if (text.size() == 7) {
    if (kind != PeriodKind::kMonth)
      return Fail("'" + shown + "' names a month, but the policy's period is " +
                  std::string(PeriodKindName(kind)) + ": give a date YYYY-MM-DD");
  } else {
    if (text.size() != 10 || text[7] != '-' || !ParseDigits(text.substr(8, 2), day))
      return Fail("'" + shown + "' is not a period: expected YYYY-MM-DD");
    if (day < 1 || day > DaysInMonth(year, month))
      return Fail("'" + shown + "' is not a date: " + kMonthNames[month - 1] + " " +
                  std::to_string(year) + " has " + std::to_string(DaysInMonth(year, month)) +
                  " days");
  }

  PeriodParse p;
  p.ordinal = PeriodOfDay(kind, DaysFromCivil(year, month, day));
  return p;
}

PeriodOrdinal PeriodOfDay(PeriodKind kind, std::int64_t days) {
  switch (kind) {
    case PeriodKind::kDay:
      return days;
    case PeriodKind::kWeek:
      return WeekOrdinalOfDay(days);
    case PeriodKind::kMonth: {
      int y, m, d;
      CivilFromDays(days, y, m, d);
      return static_cast<PeriodOrdinal>(y) * 12 + (m - 1);
    }
  }
  return days;
}

int FormatPeriodTo(PeriodKind kind, PeriodOrdinal ordinal, char* out) {
  int y = 0, m = 0, d = 1;
  switch (kind) {
    case PeriodKind::kDay:
      CivilFromDays(ordinal, y, m, d);
      break;
    case PeriodKind::kWeek:
      CivilFromDays(kMondayBefore1970 + ordinal * 7, y, m, d);
      break;
    case PeriodKind::kMonth:
      y = static_cast<int>(ordinal >= 0 ? ordinal / 12 : (ordinal - 11) / 12);
      m = static_cast<int>(ordinal - static_cast<PeriodOrdinal>(y) * 12) + 1;
      d = 1;
      break;
  }
  out[0] = static_cast<char>('0' + (y / 1000) % 10);
  out[1] = static_cast<char>('0' + (y / 100) % 10);
  out[2] = static_cast<char>('0' + (y / 10) % 10);
  out[3] = static_cast<char>('0' + y % 10);
  out[4] = '-';
  out[5] = static_cast<char>('0' + m / 10);
  out[6] = static_cast<char>('0' + m % 10);
  out[7] = '-';
  out[8] = static_cast<char>('0' + d / 10);
  out[9] = static_cast<char>('0' + d % 10);
  return 10;
}

std::string FormatPeriod(PeriodKind kind, PeriodOrdinal ordinal) {
  char buf[10];
  FormatPeriodTo(kind, ordinal, buf);
  return std::string(buf, 10);
}

}  // namespace monitors
