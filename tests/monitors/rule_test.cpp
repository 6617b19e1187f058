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

TEST_CASE("rule states keep their values across growing past the inline capacity, shrinking and copying", "[unit]") {
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
