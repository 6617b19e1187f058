// Calendar periods: day, ISO week (Monday start) and month.
//
// A period is stored as an ordinal: consecutive periods of one kind have consecutive
// ordinals, so "next period" is +1 and the distance between two periods is a subtraction.
//   day   : days since 1970-01-01
//   week  : weeks since the Monday 1969-12-29 (the ISO week holding 1970-01-01)
//   month : year * 12 + (month - 1)
// Pure functions, no state; safe from any thread.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <string_view>

namespace monitors {

enum class PeriodKind { kDay, kWeek, kMonth };

// "day", "week", "month".
std::string_view PeriodKindName(PeriodKind kind);
std::optional<PeriodKind> ParsePeriodKind(std::string_view text);

using PeriodOrdinal = std::int64_t;

// Result of parsing a period; on failure `error` explains why (e.g. "2026-02-30 is not a
// date: February 2026 has 28 days") and `ordinal` is meaningless.
// The years a period may fall in: wide enough for any sales history and its forecasts, narrow
// enough that every next period still has a four-digit year.
inline constexpr int kFirstYear = 1900;
inline constexpr int kLastYear = 2999;

struct PeriodParse {
  PeriodOrdinal ordinal = 0;
  std::string error;
  bool ok() const { return error.empty(); }
};

// Accepts an ISO date anywhere inside the period (YYYY-MM-DD, normalised to the period's first
// day), and additionally YYYY-Www (ISO week, weeks only) or YYYY-MM (months only).
// Years 1..9999.
PeriodParse ParsePeriod(PeriodKind kind, std::string_view text);

// The period of a kind that holds a day (days since 1970-01-01).
PeriodOrdinal PeriodOfDay(PeriodKind kind, std::int64_t days);

// The ISO date (YYYY-MM-DD) of the period's first day.
std::string FormatPeriod(PeriodKind kind, PeriodOrdinal ordinal);

// Writes FormatPeriod into out (at least 10 chars); returns the number of chars written.
int FormatPeriodTo(PeriodKind kind, PeriodOrdinal ordinal, char* out);

// Periods from a to b (b - a): 1 for consecutive periods, negative when b is earlier.
inline std::int64_t PeriodDistance(PeriodOrdinal a, PeriodOrdinal b) {
  return b - a;
}
inline PeriodOrdinal NextPeriod(PeriodOrdinal p) {
  return p + 1;
}

// Civil-calendar helpers (proleptic Gregorian), exposed for tests and other callers.
std::int64_t DaysFromCivil(int year, int month, int day);
void CivilFromDays(std::int64_t days, int& year, int& month, int& day);
int DaysInMonth(int year, int month);

}  // namespace monitors
