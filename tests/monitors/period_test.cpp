#include "monitors/period.h"

#include <catch2/catch.hpp>

using monitors::FormatPeriod;
using monitors::ParsePeriod;
using monitors::PeriodKind;

static std::string Normalised(PeriodKind kind, const char* text) {
  auto p = ParsePeriod(kind, text);
  REQUIRE(p.ok());
  return FormatPeriod(kind, p.ordinal);
}

TEST_CASE("a day parses to itself and consecutive days are one period apart", "[unit]") {
  CHECK(Normalised(PeriodKind::kDay, "2026-03-04") == "2026-03-04");
  auto a = ParsePeriod(PeriodKind::kDay, "2024-02-28"),
       b = ParsePeriod(PeriodKind::kDay, "2024-03-01");
  CHECK(monitors::PeriodDistance(a.ordinal, b.ordinal) == 2);  // 2024 is a leap year
  CHECK(FormatPeriod(PeriodKind::kDay, monitors::NextPeriod(a.ordinal)) == "2024-02-29");
}

TEST_CASE("any date inside an ISO week normalises to its Monday", "[unit]") {
  // 2026-01-01 is a Thursday; ISO week 2026-W01 starts Monday 2025-12-29 (ISO 8601 rule:
  // week 1 holds the year's first Thursday).
  CHECK(Normalised(PeriodKind::kWeek, "2026-01-01") == "2025-12-29");
  CHECK(Normalised(PeriodKind::kWeek, "2026-01-04") == "2025-12-29");  // Sunday
  CHECK(Normalised(PeriodKind::kWeek, "2026-01-05") == "2026-01-05");  // Monday
  CHECK(Normalised(PeriodKind::kWeek, "2026-W01") == "2025-12-29");
  CHECK(Normalised(PeriodKind::kWeek, "2026-W10") == "2026-03-02");
  CHECK(Normalised(PeriodKind::kWeek, "2020-W53") == "2020-12-28");  // 2020 has 53 ISO weeks
  CHECK(Normalised(PeriodKind::kWeek, "1970-01-01") == "1969-12-29");
  CHECK(Normalised(PeriodKind::kWeek, "1969-12-28") == "1969-12-22");
  auto a = ParsePeriod(PeriodKind::kWeek, "2025-12-31"),
       b = ParsePeriod(PeriodKind::kWeek, "2026-01-07");
  CHECK(b.ordinal - a.ordinal == 1);
}

TEST_CASE("any date inside a month normalises to its first day", "[unit]") {
  CHECK(Normalised(PeriodKind::kMonth, "2026-02-17") == "2026-02-01");
  CHECK(Normalised(PeriodKind::kMonth, "2026-02") == "2026-02-01");
  auto a = ParsePeriod(PeriodKind::kMonth, "2025-11"),
       b = ParsePeriod(PeriodKind::kMonth, "2026-02-28");
  CHECK(monitors::PeriodDistance(a.ordinal, b.ordinal) == 3);
}

TEST_CASE("impossible or malformed periods are rejected with a clear message", "[unit]") {
  auto p = ParsePeriod(PeriodKind::kDay, "2026-02-30");
  REQUIRE_FALSE(p.ok());
  CHECK(p.error == "'2026-02-30' is not a date: February 2026 has 28 days");
  CHECK_FALSE(ParsePeriod(PeriodKind::kDay, "2026-13-01").ok());
  CHECK_FALSE(ParsePeriod(PeriodKind::kDay, "2026-1-01").ok());
  CHECK_FALSE(ParsePeriod(PeriodKind::kDay, "26-01-01").ok());
  CHECK_FALSE(ParsePeriod(PeriodKind::kDay, "").ok());
  CHECK_FALSE(ParsePeriod(PeriodKind::kDay, "2026-03").ok());     // a month is not a day
  CHECK_FALSE(ParsePeriod(PeriodKind::kMonth, "2026-W03").ok());  // a week is not a month
  CHECK_FALSE(ParsePeriod(PeriodKind::kWeek, "2025-W53").ok());   // 2025 has 52 ISO weeks
  CHECK(ParsePeriod(PeriodKind::kWeek, "2026-W53").ok());         // 2026 starts on a Thursday: 53
  CHECK_FALSE(ParsePeriod(PeriodKind::kWeek, "2026-W00").ok());
  CHECK(ParsePeriod(PeriodKind::kDay, "2024-02-29").ok());
  CHECK_FALSE(ParsePeriod(PeriodKind::kDay, "2023-02-29").ok());
  CHECK_FALSE(ParsePeriod(PeriodKind::kDay, "1900-02-29").ok());  // century rule
  CHECK(ParsePeriod(PeriodKind::kDay, "2000-02-29").ok());        // 400-year rule
}

TEST_CASE("civil day numbers round-trip over four centuries", "[unit]") {
  for (std::int64_t d = monitors::DaysFromCivil(1900, 1, 1);
       d < monitors::DaysFromCivil(2300, 1, 1); d += 13) {
    int y, m, day;
    monitors::CivilFromDays(d, y, m, day);
    REQUIRE(monitors::DaysFromCivil(y, m, day) == d);
  }
}
