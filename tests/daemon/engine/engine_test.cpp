#include "daemon/engine/engine.h"

#include <atomic>
#include <catch2/catch.hpp>
#include <future>
#include <random>
#include <set>

#include "config/load.h"
#include "daemon/store/state_codec.h"
#include "tests/temp_dir.h"

using forewarden::Engine;
using forewarden::IngestReply;
using forewarden::IngestRow;
using testing_support::TempDir;

namespace {

std::shared_ptr<const config::Settings> Settings(const std::string& data,
                                                 const std::string& extra = "") {
  auto r = config::LoadSettingsText(
      "server: {data: '" + data + "'}\n" + extra +
          "policies:\n"
          "  - {name: zero, match: 'z/*', period: week, alpha: 0.3, history: 6, warmup: 1,\n"
          "     rules: [{name: drift, signal: trigg, limit: 0.5}]}\n"
          "  - {name: skip, match: 's/*', period: week, method: holt, gaps: skip, history: 6}\n",
      "test.yaml");
  REQUIRE(r.ok());
  return std::make_shared<const config::Settings>(std::move(r.settings));
}

IngestReply SubmitAndWait(Engine& e, std::vector<IngestRow> rows) {
  std::promise<IngestReply> p;
  auto f = p.get_future();
  REQUIRE(e.Submit(std::move(rows), [&](IngestReply r) { p.set_value(std::move(r)); }));
  return f.get();
}

template <typename F>
void OnEngine(Engine& e, F fn) {
  std::promise<void> p;
  REQUIRE(e.Post([&] {
    fn();
    p.set_value();
  }));
  p.get_future().get();
}

IngestRow Row(const std::string& key, std::int64_t week, double v, long line = 2) {
  IngestRow r;
  r.line = line;
  r.series = key;
  r.period = monitors::FormatPeriod(monitors::PeriodKind::kWeek, week);
  r.value = v;
  return r;
}

// The state replay would reach on these (period, value) pairs, in order.
std::string ReplayState(const config::Policy& p,
                        const std::vector<std::pair<std::int64_t, double>>& data) {
  monitors::SeriesState s = monitors::NewSeriesState(p.spec);
  monitors::StepResult r;
  for (auto [period, v] : data)
    REQUIRE(monitors::Step(p.spec, s, period, v, r) == monitors::StepStatus::kOk);
  return forewarden::EncodeState(s);
}

std::string EngineState(Engine& e, const std::string& key) {
  std::string out;
  OnEngine(e, [&] {
    auto v = e.FindSeries(key);
    if (v) out = forewarden::EncodeState(*v->state);
  });
  return out;
}

}  // namespace

TEST_CASE(
    "the engine applies actuals like replay, and restatements equal replay of the corrected "
    "history",
    "[integration]") {
  TempDir dir;
  auto settings = Settings(dir.File("data"));
  Engine e(settings, [] { return std::int64_t{0}; });
  std::string error;
  REQUIRE(e.Start().ok());
  std::vector<std::pair<std::int64_t, double>> truth;
  std::vector<IngestRow> rows;
  for (int t = 0; t < 20; ++t) {
    const double v = 10 + (t * 7) % 5;
    rows.push_back(Row("z/a", 3000 + t, v));
    truth.push_back({3000 + t, v});
  }
  IngestReply r = SubmitAndWait(e, rows);
  REQUIRE(r.status == IngestReply::Status::kOk);
  CHECK(r.counts.applied == 20);
  CHECK(r.counts.new_series == 1);
  CHECK(EngineState(e, "z/a") == ReplayState(settings->policies[0], truth));

  // resending is harmless
  r = SubmitAndWait(e, {Row("z/a", 3019, truth.back().second), Row("z/a", 3018, truth[18].second)});
  CHECK(r.counts.unchanged == 2);
  CHECK(r.counts.applied == 0);

  // a restatement within the retained history (history 6, trimmed lazily)
  r = SubmitAndWait(e, {Row("z/a", 3017, 99.0)});
  REQUIRE(r.status == IngestReply::Status::kOk);
  CHECK(r.counts.restated == 1);
  truth[17].second = 99.0;
  CHECK(EngineState(e, "z/a") == ReplayState(settings->policies[0], truth));

  // older than the retained history: refused with the line and field, nothing changes
  const std::string before = EngineState(e, "z/a");
  r = SubmitAndWait(e, {Row("z/a", 3001, 1.0, 7)});
  REQUIRE(r.status == IngestReply::Status::kRejected);
  REQUIRE(r.problems.size() == 1);
  CHECK(r.problems[0].line == 7);
  CHECK(r.problems[0].field == "period");
  CHECK_THAT(r.problems[0].message, Catch::Contains("older than the retained history"));
  CHECK(EngineState(e, "z/a") == before);
  e.Stop();

  // a restart resumes with exactly the same state
  Engine again(settings, [] { return std::int64_t{0}; });
  REQUIRE(again.Start().ok());
  CHECK(EngineState(again, "z/a") == before);
  r = SubmitAndWait(again, {Row("z/a", 3020, 12.0)});
  truth.push_back({3020, 12.0});
  CHECK(EngineState(again, "z/a") == ReplayState(settings->policies[0], truth));
}

TEST_CASE("a batch with one bad row applies nothing, not even its new series", "[integration]") {
  TempDir dir;
  auto settings = Settings(dir.File("data"));
  Engine e(settings, [] { return std::int64_t{0}; });
  std::string error;
  REQUIRE(e.Start().ok());
  REQUIRE(SubmitAndWait(e, {Row("z/a", 3000, 5)}).status == IngestReply::Status::kOk);
  const std::string before = EngineState(e, "z/a");
  IngestRow bad = Row("z/b", 3000, 1, 4);
  bad.period = "2026-02-30";
  IngestRow nomatch = Row("q/c", 3000, 1, 5);
  IngestReply r =
      SubmitAndWait(e, {Row("z/a", 3001, 6, 2), Row("z/new", 3000, 1, 3), bad, nomatch});
  REQUIRE(r.status == IngestReply::Status::kRejected);
  REQUIRE(r.problems.size() == 2);
  CHECK(r.problems[0].line == 4);
  CHECK(r.problems[0].field == "period");
  CHECK(r.problems[1].field == "series");
  CHECK_THAT(r.problems[1].message, Catch::Contains("no policy matches the series 'q/c'"));
  CHECK(EngineState(e, "z/a") == before);
  CHECK(EngineState(e, "z/new").empty());
  CHECK(EngineState(e, "z/b").empty());
  e.Stop();
  Engine again(settings, [] { return std::int64_t{0}; });
  REQUIRE(again.Start().ok());
  CHECK(EngineState(again, "z/new").empty());
  CHECK(EngineState(again, "z/a") == before);
}

TEST_CASE("gap rules and late actuals for filled or skipped periods", "[integration]") {
  TempDir dir;
  auto settings = Settings(dir.File("data"));
  Engine e(settings, [] { return std::int64_t{0}; });
  std::string error;
  REQUIRE(e.Start().ok());
  IngestReply r =
      SubmitAndWait(e, {Row("z/a", 3000, 10), Row("z/a", 3003, 10), Row("s/a", 3000, 10),
                        Row("s/a", 3001, 12), Row("s/a", 3004, 18)});
  REQUIRE(r.status == IngestReply::Status::kOk);
  CHECK(r.counts.filled == 4);
  CHECK(EngineState(e, "z/a") ==
        ReplayState(settings->policies[0], {{3000, 10}, {3001, 0}, {3002, 0}, {3003, 10}}));
  // the late actual of a zero-filled period is a restatement
  r = SubmitAndWait(e, {Row("z/a", 3001, 9), Row("s/a", 3002, 14)});
  CHECK(r.counts.restated == 2);
  CHECK(EngineState(e, "z/a") ==
        ReplayState(settings->policies[0], {{3000, 10}, {3001, 9}, {3002, 0}, {3003, 10}}));
  CHECK(EngineState(e, "s/a") ==
        ReplayState(settings->policies[1], {{3000, 10}, {3001, 12}, {3002, 14}, {3004, 18}}));
}

TEST_CASE("history is recomputed by the same step, and a reset re-levels and is audited",
          "[integration]") {
  TempDir dir;
  auto settings = Settings(dir.File("data"));
  Engine e(settings, [] { return std::int64_t{0}; });
  std::string error;
  REQUIRE(e.Start().ok());
  std::vector<IngestRow> rows;
  for (int t = 0; t < 5; ++t) rows.push_back(Row("z/a", 3000 + t, 10 + t));
  REQUIRE(SubmitAndWait(e, rows).status == IngestReply::Status::kOk);
  // Catch's assertions stay on the test thread: the engine job only collects what to check.
  std::vector<forewarden::HistoryRow> h;
  bool history_ok = false, reset_ok = false, missing_reset = true, not_found = false;
  double level = 0, live_level = 0, live_cusum = -1;
  OnEngine(e, [&] {
    history_ok = e.History("z/a", 3001, 3003, h, error);
    forewarden::Result<double> reset = e.Reset("z/a", "mean", 0, 2, "planner-7", "store refit");
    reset_ok = reset.ok();
    if (reset_ok) level = *reset;
    live_level = e.FindSeries("z/a")->state->model.level;
    live_cusum = e.FindSeries("z/a")->state->stats.cusum;
    forewarden::Result<double> missing = e.Reset("nope", "last", 0, 1, "x", "");
    missing_reset = missing.ok();
    not_found = missing.status().kind() == forewarden::ErrorKind::kNotFound;
  });
  REQUIRE(history_ok);
  REQUIRE(h.size() == 3);
  CHECK(h[0].period == 3001);
  CHECK(h[0].result.forecast == 10.0);
  CHECK(h[1].result.forecast == Approx(10 + 0.3 * 1));
  REQUIRE(reset_ok);
  CHECK(level == 13.5);
  CHECK(live_level == 13.5);
  CHECK(live_cusum == 0.0);
  CHECK_FALSE(missing_reset);
  CHECK(not_found);
  // a later restatement keeps the re-level (adjustments replay with the history)
  REQUIRE(SubmitAndWait(e, {Row("z/a", 3005, 20)}).status == IngestReply::Status::kOk);
  const std::string live = EngineState(e, "z/a");
  REQUIRE(SubmitAndWait(e, {Row("z/a", 3002, 12.0)}).counts.unchanged == 1);
  REQUIRE(SubmitAndWait(e, {Row("z/a", 3003, 13.5)}).counts.restated == 1);
  REQUIRE(SubmitAndWait(e, {Row("z/a", 3003, 13.0)}).counts.restated == 1);
  CHECK(EngineState(e, "z/a") == live);
}

TEST_CASE("a series is stale once stale_after whole periods have ended without an actual",
          "[integration]") {
  TempDir dir;
  auto settings = Settings(dir.File("data"));  // policy "zero": weekly, stale_after 2 (default)
  std::atomic<std::int64_t> now_ms{0};         // the engine thread reads the clock too
  Engine e(settings, [&] { return now_ms.load(); });
  std::string error;
  REQUIRE(e.Start().ok());
  REQUIRE(SubmitAndWait(e, {Row("z/a", 3000, 5)}).status == IngestReply::Status::kOk);
  auto stale_on = [&](std::int64_t day) {
    now_ms = day * 86400000 + 3600000;
    bool stale = false;
    OnEngine(e, [&] { stale = e.FindSeries("z/a")->stale; });
    return stale;
  };
  const std::int64_t monday = monitors::DaysFromCivil(1969, 12, 29) + 3000 * 7;  // week 3000
  CHECK_FALSE(stale_on(monday + 7 * 2));  // one week ended without its actual
  CHECK(stale_on(monday + 7 * 3));        // two weeks ended
  CHECK(monitors::FormatPeriod(monitors::PeriodKind::kWeek, 3000) ==
        monitors::FormatPeriod(monitors::PeriodKind::kDay, monday));
  CHECK_FALSE(stale_on(monday + 7 * 3 - 1));  // the second week's last day: not ended yet
}

TEST_CASE(
    "the alerting index and the read view follow every series, through rejected batches, "
    "restatements and resets",
    "[property]") {
  TempDir dir;
  auto settings = Settings(dir.File("data"));
  Engine e(settings, [] { return std::int64_t{0}; });
  std::string error;
  REQUIRE(e.Start().ok());
  std::mt19937 rng(20261202);  // seeded
  std::uniform_real_distribution<double> noise(-1, 1);
  std::vector<std::int64_t> next_week(40, 3000);
  auto check = [&] {
    std::set<std::string> all, indexed;
    OnEngine(e, [&] {
      e.ForEachSeries([&](const forewarden::SeriesView& v) {
        if (v.state->active) all.insert(std::string(v.key));
      });
      e.ForEachAlertingSeries(
          [&](const forewarden::SeriesView& v) { indexed.insert(std::string(v.key)); });
      // the read view equals the live series, row by row
      const std::shared_ptr<const forewarden::ReadView> view = e.ReadSnapshot();
      REQUIRE(view->size() == e.series_count());
      CHECK(e.ReadSnapshot() == view);  // nothing changed: the same view again
      e.ForEachSeries([&](const forewarden::SeriesView& v) {
        const forewarden::ReadRow& r = view->rows[v.index];
        CHECK(view->key(v.index) == v.key);
        CHECK(view->labels(v.index) == v.labels);
        CHECK(&view->policy(v.index) == v.spec);
        CHECK(view->stale(v.index) == v.stale);
        CHECK(bool(r.flags & forewarden::ReadRow::kActive) == (v.state->active != 0));
        CHECK(bool(r.flags & forewarden::ReadRow::kWarming) ==
              forewarden::Warming(*v.state, *v.spec));
        if (v.state->seen) CHECK(r.last_period == v.state->last_period);
        const auto trigg = monitors::TriggSignal(v.state->stats);
        if (!forewarden::Warming(*v.state, *v.spec) && trigg)
          CHECK(r.trigg == static_cast<float>(*trigg));
        else
          CHECK(std::isnan(r.trigg));
        bool beyond = false;  // a rule that holds or was just beyond its limit
        for (const auto& rule : v.state->rules) beyond = beyond || rule.active || rule.run > 0;
        if (beyond && !forewarden::Warming(*v.state, *v.spec)) CHECK(r.closeness >= 1);
      });
    });
    CHECK(indexed == all);
    return all.size();
  };
  std::size_t most = 0;
  for (int round = 0; round < 60; ++round) {
    std::vector<IngestRow> rows;
    for (int k = 0; k < 40; ++k) {
      if (rng() % 3) continue;
      // every fourth series steps up for a while: its drift rule holds, then clears
      const double level = (k % 4 == 0 && round > 10 && round < 30) ? 40 : 10;
      const std::int64_t week = next_week[static_cast<std::size_t>(k)];
      rows.push_back(Row("z/" + std::to_string(k), week, level + noise(rng)));
      if (rng() % 5 == 0 && week > 3001)  // a restatement of the week before
        rows.push_back(Row("z/" + std::to_string(k), week - 1, 10 + noise(rng)));
    }
    const bool reject = rng() % 6 == 0;
    if (reject) rows.push_back(Row("z/0", 1, -5));  // older than the history: the batch is refused
    const IngestReply r = SubmitAndWait(e, rows);
    CHECK((r.status == IngestReply::Status::kOk) == !reject);
    if (!reject)
      for (const IngestRow& row : rows) {
        const std::size_t k = std::stoul(row.series.substr(2));
        const std::int64_t w =
            monitors::ParsePeriod(monitors::PeriodKind::kWeek, row.period).ordinal;
        next_week[k] = std::max(next_week[k], w + 1);
      }
    most = std::max(most, check());
    if (round % 7 == 3) {  // a planner re-levels a series between batches
      bool reset = false;
      OnEngine(e, [&] { reset = e.Reset("z/4", "last", 0, 1, "planner", "").ok(); });
      if (reset) check();
    }
  }
  CHECK(most > 0);  // some series did hold the rule
  e.Stop();
}
