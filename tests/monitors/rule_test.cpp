#include "monitors/rule.h"

#include <catch2/catch.hpp>

using monitors::EvaluateRule;
using monitors::RuleChange;
using monitors::RuleSpec;
using monitors::RuleState;

TEST_CASE("a rule holds only after the signal persists beyond the limit", "[unit]") {
  RuleSpec r;
  r.limit = 0.5;
  r.clear = 0.5;
  r.persistence = 3;
  RuleState st;
  CHECK(EvaluateRule(r, st, 0.6) == RuleChange::kNone);
  CHECK(EvaluateRule(r, st, -0.7) == RuleChange::kNone);  // both directions count
  CHECK(EvaluateRule(r, st, 0.4) == RuleChange::kNone);   // the run breaks
  CHECK(EvaluateRule(r, st, 0.6) == RuleChange::kNone);
  CHECK(EvaluateRule(r, st, 0.6) == RuleChange::kNone);
  CHECK(EvaluateRule(r, st, 0.6) == RuleChange::kOpened);
  CHECK(st.active);
  CHECK(EvaluateRule(r, st, 0.9) == RuleChange::kNone);
}

TEST_CASE("hysteresis: a holding rule clears only within the clear level", "[unit]") {
  RuleSpec r;
  r.limit = 0.6;
  r.clear = 0.3;
  RuleState st;
  CHECK(EvaluateRule(r, st, 0.61) == RuleChange::kOpened);
  CHECK(EvaluateRule(r, st, 0.5) == RuleChange::kNone);  // below the limit, above clear
  CHECK(EvaluateRule(r, st, 0.31) == RuleChange::kNone);
  CHECK(EvaluateRule(r, st, 0.3) == RuleChange::kCleared);
  CHECK_FALSE(st.active);
}

TEST_CASE("direction picks which sign of error a rule watches", "[unit]") {
  RuleSpec under, over;
  under.limit = over.limit = under.clear = over.clear = 2;
  under.direction = monitors::Direction::kUnder;  // actuals above forecast: positive signal
  over.direction = monitors::Direction::kOver;
  RuleState a, b;
  CHECK(EvaluateRule(under, a, -3) == RuleChange::kNone);
  CHECK(EvaluateRule(over, b, -3) == RuleChange::kOpened);
  CHECK(EvaluateRule(under, a, 3) == RuleChange::kOpened);
  CHECK(EvaluateRule(over, b, 3) == RuleChange::kCleared);
}

TEST_CASE("an undefined signal leaves a rule as it was", "[unit]") {
  RuleSpec r;
  r.limit = r.clear = 1;
  r.persistence = 2;
  RuleState st;
  EvaluateRule(r, st, 2.0);
  CHECK(EvaluateRule(r, st, std::nullopt) == RuleChange::kNone);
  CHECK(st.run == 1);
  CHECK(EvaluateRule(r, st, 2.0) == RuleChange::kOpened);
}

TEST_CASE(
    "rule states keep their values across growing past the inline capacity, shrinking and copying",
    "[unit]") {
  monitors::RuleStates s;
  s.assign(3, RuleState{});
  s[2].run = 7;
  s[2].active = true;
  s.resize(10);  // to the heap
  CHECK(s.size() == 10);
  CHECK(s[2].run == 7);
  CHECK(s[9].run == 0);
  s[9].run = 65535;
  monitors::RuleStates copy = s;
  CHECK(copy[9].run == 65535);
  CHECK(copy[2].active);
  s.resize(2);  // back inline
  CHECK(s.size() == 2);
  s.resize(4);
  CHECK(s[2].run == 0);  // states past the old size start clear
  copy = s;
  CHECK(copy.size() == 4);
  monitors::RuleSpec r;
  r.limit = r.clear = 1;
  RuleState st;
  st.run = 65535;
  EvaluateRule(r, st, 5.0);
  CHECK(st.run == 65535);  // saturates
}

TEST_CASE("an episode spans the holding periods and ends after resolve_after clear ones",
          "[unit]") {
  RuleSpec r;
  r.limit = r.clear = 0.5;
  r.resolve_after = 2;
  RuleState st;
  auto step = [&](double v) {
    EvaluateRule(r, st, v);
    return monitors::AdvanceEpisode(r, st, v);
  };
  CHECK(step(0.6).opened);
  CHECK_FALSE(step(0.4).resolved);  // one clear period
  auto again = step(0.7);           // holds again: the same episode goes on
  CHECK_FALSE(again.opened);
  CHECK_FALSE(step(0.1).resolved);
  CHECK(step(0.1).resolved);
  CHECK_FALSE(st.open);
  CHECK(step(0.9).opened);  // a new episode
  // undefined values change nothing
  CHECK_FALSE(monitors::AdvanceEpisode(r, st, std::nullopt).resolved);
}

TEST_CASE("an episode escalates once when the signal passes the escalation limit", "[unit]") {
  RuleSpec r;
  r.limit = r.clear = 4;
  r.severity = monitors::Severity::kWarning;
  r.escalate_limit = 8;
  RuleState st;
  auto step = [&](double v) {
    EvaluateRule(r, st, v);
    return monitors::AdvanceEpisode(r, st, v);
  };
  CHECK(step(5).opened);
  CHECK(monitors::EpisodeSeverity(r, st) == monitors::Severity::kWarning);
  CHECK(step(-9).escalated);  // direction both
  CHECK(monitors::EpisodeSeverity(r, st) == monitors::Severity::kCritical);
  CHECK_FALSE(step(10).escalated);
  CHECK(step(1).resolved);
  // opening beyond the escalation limit opens escalated, with no separate escalation
  auto c = step(9);
  CHECK(c.opened);
  CHECK_FALSE(c.escalated);
  CHECK(monitors::EpisodeSeverity(r, st) == monitors::Severity::kCritical);
}
