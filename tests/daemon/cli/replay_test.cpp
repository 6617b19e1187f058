#include "daemon/cli/replay.h"

#include <catch2/catch.hpp>
#include <filesystem>
#include <map>
#include <sstream>

#include "daemon/cli/commands.h"
#include "daemon/common/parse_number.h"
#include "daemon/common/text_out.h"
#include "tests/temp_dir.h"

using testing_support::TempDir;

namespace {

const char* kSettings =
    "policies:\n"
    "  - name: weekly\n"
    "    match: '*'\n"
    "    period: week\n"
    "    alpha: 0.1\n"
    "    signal_beta: 0.2\n"
    "    rules:\n"
    "      - {name: low-side, signal: cusum, limit: 4, direction: over-forecast}\n"
    "      - {name: drift, signal: trigg, limit: 0.9}\n";

struct Run {
  int rc;
  std::string out, err, output;
};

Run Replay(const TempDir& dir, const std::string& csv, const char* settings = kSettings) {
  const std::string cfg = dir.Write("s.yaml", settings);
  const std::string in = dir.Write("in.csv", csv);
  const std::string outfile = dir.File("out.csv");
  std::filesystem::remove(outfile);
  std::ostringstream out, err;
  const int rc = forewarden::RunCommand(
      {"replay", "--config", cfg, "--input", in, "--output", outfile}, out, err);
  return {rc, out.str(), err.str(),
          std::filesystem::exists(outfile) ? TempDir::Read(outfile) : std::string("<none>")};
}

std::vector<std::string> Lines(const std::string& text) {
  std::vector<std::string> lines;
  std::istringstream in(text);
  for (std::string line; std::getline(in, line);) lines.push_back(line);
  return lines;
}

}  // namespace

TEST_CASE("replay writes one row per actual with the contract's columns", "[integration]") {
  TempDir dir;
  // NIST e-Handbook 6.4.3.1 data (alpha 0.1, S2 = y1), interleaved with a second series.
  const double nist[] = {71, 70, 69, 68, 64, 65, 72, 78, 75, 75, 75, 70};
  std::string csv;
  csv = "series,period,value\n";
  for (int t = 0; t < 12; ++t) {
    csv += "nist,2026-W" + std::string(t + 1 < 10 ? "0" : "") + std::to_string(t + 1) + "," +
           forewarden::FormatNumber(nist[t]) + "\n";
    if (t < 3)
      csv += "\"other, quoted\",2026-01-" + std::to_string(13 + 7 * t) + "," + std::to_string(t) +
             ".5\n";
  }
  Run r = Replay(dir, csv);
  INFO(r.err);
  REQUIRE(r.rc == 0);
  auto lines = Lines(r.output);
  REQUIRE(lines.size() == 1 + 15);
  CHECK(lines[0] ==
        "series,period,actual,forecast,error,alpha,smoothed_error,mad,cusum,trigg_signal,"
        "cusum_signal,lower,upper,alerts");
  CHECK(lines[1] == "nist,2025-12-29,71,,,0.1,0,0,0,,,,,");
  CHECK(lines[2] == "\"other, quoted\",2026-01-12,0.5,,,0.1,0,0,0,,,,,");
  // period 2: forecast 71, error -1; E = 0.2 * -1, M = 0.2, C = -1; signals -1 and -5.
  CHECK(lines[3] == "nist,2026-01-05,70,71,-1,0.1,-0.2,0.2,-1,-1,-5,,,low-side;drift");
  // shortest round-trip numbers: 70.9 is printed as 70.9, not 70.900000000000006
  CHECK(lines[5].rfind("nist,2026-01-12,69,70.9,-1.9", 0) == 0);
  CHECK_THAT(r.err, Catch::Contains("replay: 2 series, 15 actuals"));
  // the summary counts each episode: a row holding the rule after one that did not
  long episodes = 0;
  std::map<std::string, bool> held;
  for (std::size_t i = 1; i < lines.size(); ++i) {
    const std::string key = lines[i].substr(0, lines[i].find(",2026-"));  // keys hold no "2026-"
    const bool now = lines[i].find("low-side") != std::string::npos;
    episodes += now && !held[key];
    held[key] = now;
  }
  CHECK(episodes >= 1);
  CHECK_THAT(r.err, Catch::Contains("weekly/low-side: " + std::to_string(episodes) + "\n"));
  // NIST forecast of the last point, 71.7 in the handbook (exact 71.66528274)
  CHECK_THAT(lines.back(), Catch::StartsWith("nist,2026-03-16,70,71.6652827"));
  const std::string forecast = lines.back().substr(19, lines.back().find(',', 19) - 19);
  CHECK(std::stod(forecast) == Approx(71.66528274).margin(1e-8));
}

TEST_CASE("replay refuses bad input with the line and field, and writes nothing", "[integration]") {
  TempDir dir;
  struct Case {
    std::string csv;
    std::string message;
  };
  const std::vector<Case> cases = {
      {"series,value\na,1\n", "line 1: the header has no 'period' column"},
      {"series,period,value,\n", "column 4 of the header has no name"},
      {"", "empty input"},
      {"series,period,value\na,2026-01-05,abc\n", "line 2, field value: 'abc' is not a number"},
      {"series,period,value\na,2026-01-05,\n", "line 2, field value: '' is not a number"},
      {"series,period,value\na,2026-01-05,1\na,2026-01-12,nan\n",
       "line 3, field value: the value is not a finite number"},
      {"series,period,value\na,2026-01-05,inf\n",
       "line 2, field value: the value is not a finite number"},
      {"series,period,value\na,2026-02-30,1\n",
       "line 2, field period: '2026-02-30' is not a date: February 2026 has 28 days"},
      {"series,period,value\n,2026-01-05,1\n", "line 2, field series: the series key is empty"},
      {"series,period,value\na,2026-01-12,1\nb,2026-01-05,1\na,2026-01-05,2\n",
       "line 4, field period: period 2026-01-05 is not after the series' last period 2026-01-12"},
      {"series,period,value\na,2026-01-05,1\na,2026-01-07,2\n",
       "line 3, field period: period 2026-01-05 is not after"},
      {"series,period,value\na,2026-01-05\n", "line 2: expected 3 fields, found 2"},
      {"series,period,value\n\"a,2026-01-05,1\n", "line 2: a quoted field is not closed"},
  };
  for (const Case& c : cases) {
    INFO(c.csv);
    Run r = Replay(dir, c.csv);
    CHECK(r.rc == 2);
    CHECK_THAT(r.err, Catch::Contains(c.message));
    CHECK(r.output == "<none>");
    CHECK_FALSE(std::filesystem::exists(dir.File("out.csv.partial")));
  }
}

TEST_CASE("replay rejects series no policy takes and settings that do not load", "[integration]") {
  TempDir dir;
  Run r = Replay(dir, "series,period,value\nsouth/x,2026-01-05,1\n",
                 "policies:\n  - {name: n, match: 'north/*', period: week}\n");
  CHECK(r.rc == 2);
  CHECK_THAT(r.err,
             Catch::Contains("line 2, field series: no policy matches the series 'south/x'"));
  r = Replay(dir, "series,period,value\n", "policies:\n  - {name: n, match: '*', period: year}\n");
  CHECK(r.rc == 2);
  CHECK_THAT(r.err, Catch::Contains("s.yaml:2:35: policies[0].period: must be day, week or month"));
  CHECK_THAT(r.err, Catch::Contains("1 problem in"));
}

TEST_CASE("extra columns are labels that policies can match on", "[integration]") {
  TempDir dir;
  Run r = Replay(dir, "series,channel,period,value\na,web,2026-01-07,1\nb,store,2026-01-07,2\n",
                 "policies:\n"
                 "  - {name: web, match: {key: '*', labels: {channel: web}}, period: day}\n"
                 "  - {name: rest, match: '*', period: week}\n");
  INFO(r.err);
  REQUIRE(r.rc == 0);
  auto lines = Lines(r.output);
  CHECK(lines[1].rfind("a,2026-01-07,1,", 0) == 0);  // a day: stays the 7th
  CHECK(lines[2].rfind("b,2026-01-05,2,", 0) == 0);  // a week: Monday the 5th
  CHECK_THAT(r.err, Catch::Contains("replay: 2 series"));
}

TEST_CASE("check-config lists every problem or summarises the policies", "[integration]") {
  TempDir dir;
  std::ostringstream out, err;
  const std::string bad = dir.Write("bad.yaml",
                                    "policies:\n  - {name: a, match: '*', period: week, alpha: 2}\n"
                                    "  - {name: b, match: '*', period: month, coverage: 1}\n");
  CHECK(forewarden::RunCommand({"check-config", bad}, out, err) == 2);
  CHECK_THAT(err.str(), Catch::Contains("policies[0].alpha"));
  CHECK_THAT(err.str(), Catch::Contains("policies[1].coverage"));
  CHECK_THAT(err.str(), Catch::Contains("2 problems"));
  std::ostringstream out2, err2;
  const std::string good = dir.Write("good.yaml", kSettings);
  CHECK(forewarden::RunCommand({"check-config", good}, out2, err2) == 0);
  CHECK_THAT(out2.str(), Catch::Contains("1 policy"));
  CHECK_THAT(out2.str(), Catch::Contains("rule drift: trigg beyond 0.9"));
}

TEST_CASE("simulate is deterministic for a seed and replays cleanly", "[integration]") {
  TempDir dir;
  std::ostringstream out, err;
  auto sim = [&](const std::string& file, const char* seed) {
    return forewarden::RunCommand(
        {"simulate", "--series", "50", "--periods", "30", "--seed", seed, "--output",
         dir.File(file), "--truth", dir.File(file + ".truth")},
        out, err);
  };
  REQUIRE(sim("a.csv", "5") == 0);
  REQUIRE(sim("b.csv", "5") == 0);
  REQUIRE(sim("c.csv", "6") == 0);
  CHECK(TempDir::Read(dir.File("a.csv")) == TempDir::Read(dir.File("b.csv")));
  CHECK(TempDir::Read(dir.File("a.csv")) != TempDir::Read(dir.File("c.csv")));
  CHECK(Lines(TempDir::Read(dir.File("a.csv"))).size() == 1 + 50 * 30);
  auto truth = Lines(TempDir::Read(dir.File("a.csv.truth")));
  CHECK(truth[0] == "series,period,kind,size,sigmas");
  const std::string cfg = std::string(FOREWARDEN_SOURCE_DIR) + "/config/demo.yaml";
  std::ostringstream out2, err2;
  CHECK(forewarden::RunCommand({"replay", "--config", cfg, "--input", dir.File("a.csv"), "--output",
                                dir.File("r.csv")},
                               out2, err2) == 0);
  CHECK(Lines(TempDir::Read(dir.File("r.csv"))).size() == 1 + 50 * 30);
}

TEST_CASE("a bad row after many good ones still writes nothing (regression: use after free)",
          "[integration]") {
  // Rows travel to formatter threads in blocks of 8,192; a bad row late in the input must
  // abandon the queued blocks before the series keys they point into are freed.
  TempDir dir;
  std::string csv = "series,period,value\n";
  for (int t = 0; t < 30; ++t)
    for (int k = 0; k < 1000; ++k)
      csv += "s" + std::to_string(k) + "," +
             monitors::FormatPeriod(monitors::PeriodKind::kWeek, 2900 + t) + "," +
             std::to_string((k * 7 + t * 3) % 50) + "\n";
  csv += "s1,2026-02-30,1\n";
  Run r = Replay(dir, csv);
  CHECK(r.rc == 2);
  CHECK_THAT(r.err, Catch::Contains("line 30002, field period"));
  CHECK(r.output == "<none>");
}

TEST_CASE("numbers are read whole: beyond the doubles is not finite, text is not a number",
          "[unit]") {
  double v = 7;
  CHECK(forewarden::ReadNumber("1e999", v) == forewarden::NumberText::kNotFinite);
  CHECK(forewarden::ReadNumber("-1e999", v) == forewarden::NumberText::kNotFinite);
  CHECK(v < 0);
  CHECK(forewarden::ReadNumber("nan", v) == forewarden::NumberText::kNotFinite);
  CHECK(forewarden::ReadNumber("12abc", v) == forewarden::NumberText::kNotANumber);
  CHECK(forewarden::ReadNumber("", v) == forewarden::NumberText::kNotANumber);
  CHECK(forewarden::ReadNumber("+2.5", v) == forewarden::NumberText::kFinite);
  CHECK(v == 2.5);
  CHECK(forewarden::ReadNumber("1e-999", v) == forewarden::NumberText::kFinite);  // underflows to 0
  CHECK(v == 0.0);
  CHECK(forewarden::ParseWholeNumber("4294967297", 1, 100000).status().message() ==
        "4294967297 is outside 1..100000");
  CHECK(!forewarden::ParseWholeNumber("1e3", 0, 10000).ok());
  CHECK(*forewarden::ParseWholeNumber("-5", -10, 10) == -5);
}

TEST_CASE("replay --horizon writes the forecasts ahead made after each actual", "[integration]") {
  TempDir dir;
  const std::string cfg = dir.Write("s.yaml",
                                    "policies:\n"
                                    "  - {name: t, match: '*', period: week, method: holt, alpha: "
                                    "0.5, trend_beta: 0.2, start: {level: 10, trend: 1}}\n");
  std::string csv = "series,period,value\n";
  const double y[] = {11, 12.5, 13, 15, 15.5, 17};
  for (int t = 0; t < 6; ++t)
    csv += "a,2026-W0" + std::to_string(t + 1) + "," + forewarden::FormatNumber(y[t]) + "\n";
  const std::string in = dir.Write("in.csv", csv), outfile = dir.File("out.csv");
  std::ostringstream out, err;
  REQUIRE(forewarden::RunCommand(
              {"replay", "--config", cfg, "--input", in, "--output", outfile, "--horizon", "3"},
              out, err) == 0);
  auto lines = Lines(TempDir::Read(outfile));
  REQUIRE(lines.size() == 7);
  CHECK_THAT(lines[0], Catch::EndsWith(",alerts,ahead_1,ahead_2,ahead_3"));
  auto fields = [](const std::string& line) {
    std::vector<std::string> f;
    std::istringstream s(line);
    for (std::string x; std::getline(s, x, ',');) f.push_back(x);
    if (!line.empty() && line.back() == ',') f.push_back("");
    return f;
  };
  for (std::size_t i = 1; i + 1 < lines.size(); ++i) {
    const auto now = fields(lines[i]), next = fields(lines[i + 1]);
    REQUIRE(now.size() == 17);
    // ahead_1 after this actual is the next row's forecast (fixed before its actual)
    CHECK(std::stod(now[14]) == Approx(std::stod(next[3])).epsilon(1e-15));
    // holt: a straight line, level + h * trend
    const double slope = std::stod(now[15]) - std::stod(now[14]);
    CHECK(std::stod(now[16]) - std::stod(now[15]) == Approx(slope).epsilon(1e-12));
  }
  // a horizon out of 1..104, not a whole number, or empty is refused naming the flag
  for (const char* bad : {"105", "0", "-1", "abc", "2.5", ""}) {
    std::ostringstream out2, err2;
    CHECK(forewarden::RunCommand({"replay", "--config", cfg, "--input", in, "--horizon", bad}, out2,
                                 err2) == 2);
    CHECK_THAT(err2.str(), Catch::Contains("--horizon"));
  }
}

TEST_CASE("replay --alerts gives each episode its diagnosis: start, kind, level and action",
          "[integration]") {
  TempDir dir;
  // A step from 10 to 40 in week 7 under ses alpha 0.1 with M = 1 before the first forecast:
  // the spike rule (error beyond 3 sigma) opens in week 7. Diagnosis by hand over weeks 1-9
  // (forecasts 10 for weeks 2-7, then 13 and 15.7): the start statistic is 90^2 / 3 = 2700 at
  // week 7 against 90^2 / 4 = 2025 at week 6, so the change began in week 7; deviations 30, 30,
  // 30: a step up to 40.
  const std::string cfg = dir.Write("s.yaml",
                                    "policies:\n"
                                    "  - name: one\n"
                                    "    match: '*'\n"
                                    "    period: week\n"
                                    "    alpha: 0.1\n"
                                    "    initial_mad: 1\n"
                                    "    rules:\n"
                                    "      - {name: spike, signal: error, limit: 3}\n");
  std::string csv = "series,period,value\n";
  for (int w = 1; w <= 9; ++w)
    csv += "a,2026-W0" + std::to_string(w) + "," + (w >= 7 ? "40" : "10") + "\n";
  const std::string in = dir.Write("in.csv", csv);
  std::ostringstream out, err;
  REQUIRE(forewarden::RunCommand({"replay", "--config", cfg, "--input", in, "--output",
                                  dir.File("o.csv"), "--alerts", dir.File("a.csv")},
                                 out, err) == 0);
  const std::vector<std::string> lines = Lines(TempDir::Read(dir.File("a.csv")));
  REQUIRE(lines.size() == 2);
  CHECK(lines[0] ==
        "series,policy,rule,severity,opened,escalated,resolved,change_began,kind,level,"
        "level_lower,level_upper,action");
  CHECK(lines[1].rfind("a,one,spike,warning,2026-02-09,,", 0) == 0);
  CHECK(lines[1].find(",2026-02-09,step-up,40,") != std::string::npos);
  CHECK(lines[1].find(",re-level to 40") != std::string::npos);
}
