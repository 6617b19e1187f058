#include "daemon/cli/tune.h"

#include <catch2/catch.hpp>
#include <cmath>
#include <filesystem>
#include <map>
#include <regex>
#include <sstream>

#include "config/load.h"
#include "daemon/cli/commands.h"
#include "tests/temp_dir.h"

using testing_support::TempDir;

namespace {

struct Run {
  int rc;
  std::string out, err;
};

Run Command(const std::vector<std::string>& args) {
  std::ostringstream out, err;
  const int rc = forewarden::RunCommand(args, out, err);
  return {rc, out.str(), err.str()};
}

std::vector<std::string> Split(const std::string& line) {
  std::vector<std::string> f;
  std::string cur;
  for (char c : line) {
    if (c == ',') {
      f.push_back(cur);
      cur.clear();
    } else {
      cur += c;
    }
  }
  f.push_back(cur);
  return f;
}

// The results CSV as one map per candidate (no field of these tests holds a comma).
std::vector<std::map<std::string, std::string>> Results(const std::string& path) {
  std::istringstream in(TempDir::Read(path));
  std::string line;
  std::getline(in, line);
  const std::vector<std::string> head = Split(line);
  std::vector<std::map<std::string, std::string>> rows;
  while (std::getline(in, line)) {
    const std::vector<std::string> f = Split(line);
    REQUIRE(f.size() == head.size());
    std::map<std::string, std::string> row;
    for (std::size_t i = 0; i < f.size(); ++i) row[head[i]] = f[i];
    rows.push_back(row);
  }
  return rows;
}

double Num(const std::map<std::string, std::string>& row, const char* key) {
  return std::stod(row.at(key));
}

// The settings text with the values of the keys tune may change masked, and lines holding
// only such a key dropped.
std::string MaskTuned(const std::string& text) {
  static const std::regex value(
      "(alpha|trend_beta|damping|season_gamma|false_alert_every|adaptive): "
      "*(\\{[^}]*\\}|[^,}#\\n]*)");
  static const std::regex alone("^ *(alpha|trend_beta|damping|season_gamma|adaptive): X *$");
  std::istringstream in(std::regex_replace(text, value, "$1: X"));
  std::string out;
  for (std::string line; std::getline(in, line);)
    if (!std::regex_match(line, alone)) out += line + "\n";
  return out;
}

}  // namespace

TEST_CASE("tune's accuracy figures for one series match a hand computation", "[reference]") {
  TempDir dir;
  // ses from the first actual: forecasts 10, 11, 11 for 12, 11, 15 at alpha 0.5; errors
  // 2, 0, 4 (by hand). MAE 2, RMSE sqrt(20/3), mean error 2; the naive forecast's in-sample
  // MAE is (2 + 1 + 4) / 3, so MASE = 2 / (7/3) = 6/7 (Hyndman and Koehler 2006). At alpha 1
  // ses is the naive forecast itself: errors 2, -1, 4 and MASE exactly 1.
  // A second policy takes no series of the history: it is left out of every output.
  const std::string cfg = dir.Write("s.yaml",
                                    "policies:\n"
                                    "  - name: unused\n"
                                    "    match: 'zzz*'\n"
                                    "    period: week\n"
                                    "  - name: one\n"
                                    "    match: '*'\n"
                                    "    period: week\n"
                                    "    alpha: 0.5\n");
  const std::string grid = dir.Write("g.yaml", "default: {alpha: [1], adaptive: [off]}\n");
  const std::string in = dir.Write("in.csv",
                                   "series,period,value\n"
                                   "a,2026-W01,10\na,2026-W02,12\na,2026-W03,11\na,2026-W04,15\n");
  const Run r = Command(
      {"tune", "--config", cfg, "--input", in, "--grid", grid, "--results", dir.File("r.csv")});
  INFO(r.err);
  REQUIRE(r.rc == 0);
  const auto rows = Results(dir.File("r.csv"));
  REQUIRE(rows.size() == 2);
  CHECK(rows[0].at("current") == "yes");
  CHECK(Num(rows[0], "alpha") == 0.5);
  CHECK(Num(rows[0], "periods_scored") == 3);
  CHECK(Num(rows[0], "mae") == Approx(2.0).epsilon(1e-15));
  CHECK(Num(rows[0], "rmse") == Approx(std::sqrt(20.0 / 3)).epsilon(1e-15));
  CHECK(Num(rows[0], "mean_error") == Approx(2.0).epsilon(1e-15));
  CHECK(Num(rows[0], "mase") == Approx(6.0 / 7).epsilon(1e-15));
  CHECK(Num(rows[1], "alpha") == 1.0);
  CHECK(Num(rows[1], "mae") == Approx(7.0 / 3).epsilon(1e-15));
  CHECK(Num(rows[1], "mean_error") == Approx(5.0 / 3).epsilon(1e-15));
  CHECK(Num(rows[1], "mase") == Approx(1.0).epsilon(1e-15));
  // the current settings are more accurate: kept
  CHECK(rows[0].at("chosen") == "yes");
  CHECK(r.out.find("none (keep)") != std::string::npos);
  CHECK(r.out.find("unused") == std::string::npos);
}

TEST_CASE("tune scores alerts against a truth file: false, caught and the delay", "[integration]") {
  TempDir dir;
  // Spike rule (error beyond 3 sigmas) on ses alpha 0.5 with M = 1 before the first forecast.
  // Series a: a step from 10 to 40 in week 7, listed in the truth file: the rule opens in week
  // 7 (error 30 against M = 0.9^5), holds in week 8 and clears in week 9, one alert, delay 0.
  // Series b: one week of 40 in week 4 and no change listed: one false alert (weeks 4 and 5
  // beyond the limit, one episode). Watched periods before a change: a 2..6 (5), b 2..10 (9).
  const std::string cfg = dir.Write("s.yaml",
                                    "policies:\n"
                                    "  - name: one\n"
                                    "    match: '*'\n"
                                    "    period: week\n"
                                    "    alpha: 0.5\n"
                                    "    initial_mad: 1\n"
                                    "    rules:\n"
                                    "      - {name: spike, signal: error, limit: 3}\n");
  std::string csv = "series,period,value\n";
  for (int w = 1; w <= 10; ++w) {
    csv += "a,2026-W" + std::string(w < 10 ? "0" : "") + std::to_string(w) + "," +
           (w >= 7 ? "40" : "10") + "\n";
    csv += "b,2026-W" + std::string(w < 10 ? "0" : "") + std::to_string(w) + "," +
           (w == 4 ? "40" : "10") + "\n";
  }
  const std::string in = dir.Write("in.csv", csv);
  const std::string truth = dir.Write("t.csv",
                                      "\xEF\xBB\xBFseries,period,kind\n"  // with a byte-order mark
                                      "a,2026-02-11,step-up\n"            // a date inside week 7
                                      "zzz,2026-W03,step-up\n");
  const std::string grid = dir.Write("g.yaml", "default: {alpha: [0.5], adaptive: [off]}\n");
  const Run r = Command({"tune", "--config", cfg, "--input", in, "--truth", truth, "--grid", grid,
                         "--results", dir.File("r.csv")});
  INFO(r.err);
  REQUIRE(r.rc == 0);
  const auto rows = Results(dir.File("r.csv"));
  REQUIRE(rows.size() == 1);
  CHECK(Num(rows[0], "periods_scored") == 18);
  CHECK(Num(rows[0], "alerts_per_1000") == Approx(1000.0 * 2 / 18));
  CHECK(Num(rows[0], "false_alerts_per_1000") == Approx(1000.0 / 14));
  CHECK(Num(rows[0], "changes") == 1);
  CHECK(Num(rows[0], "changes_caught") == 1);
  CHECK(Num(rows[0], "median_delay") == 0);
  CHECK(r.out.find("1 changes in") != std::string::npos);  // zzz is not in the history
}

TEST_CASE("tune refuses a bad history exactly as replay does, and writes nothing",
          "[integration]") {
  TempDir dir;
  const std::string cfg =
      dir.Write("s.yaml", "policies:\n  - name: one\n    match: '*'\n    period: week\n");
  struct Case {
    const char* csv;
    const char* want;
  } cases[] = {
      {"series,period,value\na,2026-W02,3\na,2026-W01,4\n", "line 3, field period"},
      {"series,period,value\na,2026-W02,x\n", "line 2, field value"},
      {"series,period,value\na,2026-W99,3\n", "line 2, field period"},
      {"series,period\na,2026-W01\n", "line 1: "},
      {"series,period,value\na,2026-W01,-5\n", "line 2, field value"},
      {"series,period,value\n,2026-W01,5\n", "line 2, field series"},
  };
  for (const Case& c : cases) {
    const std::string in = dir.Write("in.csv", c.csv);
    const Run replay =
        Command({"replay", "--config", cfg, "--input", in, "--output", dir.File("o.csv")});
    const Run tune =
        Command({"tune", "--config", cfg, "--input", in, "--results", dir.File("r.csv"),
                 "--settings-out", dir.File("rec.yaml"), "--report", dir.File("rep.html")});
    INFO(c.csv);
    INFO(tune.err);
    CHECK(replay.rc == 2);
    CHECK(tune.rc == 2);
    CHECK(tune.err.find(c.want) != std::string::npos);
    // the same problem text after each command's own prefix
    const std::string said = replay.err.substr(0, replay.err.find('\n'));
    const std::string what = said.substr(said.find(c.want));
    CHECK(tune.err.find(what) != std::string::npos);
    CHECK_FALSE(std::filesystem::exists(dir.File("r.csv")));
    CHECK_FALSE(std::filesystem::exists(dir.File("rec.yaml")));
    CHECK_FALSE(std::filesystem::exists(dir.File("rep.html")));
  }
  const std::string in = dir.Write("in.csv", "series,period,value\na,2026-W01,3\n");
  const std::string truth = dir.Write("t.csv", "series,period,kind\na,2026-W60,step-up\n");
  const Run bad_truth = Command({"tune", "--config", cfg, "--input", in, "--truth", truth});
  CHECK(bad_truth.rc == 2);
  CHECK(bad_truth.err.find(truth + ": line 2, field period: ") != std::string::npos);
  const Run bad_grid = Command({"tune", "--config", cfg, "--input", in, "--grid",
                                dir.Write("g.yaml", "default:\n  alpah: [0.1]\n")});
  CHECK(bad_grid.rc == 2);
  CHECK(bad_grid.err.find("g.yaml:2:3: default.alpah: unknown key") != std::string::npos);
  const Run same = Command({"tune", "--config", cfg, "--input", in, "--results", in});
  CHECK(same.rc == 2);
  CHECK(same.err.find("is an input") != std::string::npos);
  const Run dash = Command({"tune", "--config", cfg, "--input", in, "--report", "-"});
  CHECK(dash.rc == 2);
  CHECK(dash.err.find("'-' is not one") != std::string::npos);
  for (const char* t : {"0", "-1", "2.5", "abc", "", "1025", "99999999999999999999"}) {
    const Run threads = Command({"tune", "--config", cfg, "--input", in, "--threads", t});
    INFO(t);
    CHECK(threads.rc == 2);
    CHECK(threads.err.find("--threads") != std::string::npos);
  }
  const Run no_value = Command({"tune", "--config", cfg, "--input", in, "--threads"});
  CHECK(no_value.rc == 2);
  CHECK(no_value.err.find("needs a value") != std::string::npos);
  const Run no_input = Command({"tune", "--config", cfg});
  CHECK(no_input.rc == 2);
  CHECK(no_input.err.find("usage: forewarden tune") != std::string::npos);
  const Run no_truth =
      Command({"tune", "--config", cfg, "--input", in, "--truth", "/nonexistent/t.csv"});
  CHECK(no_truth.rc == 1);
  CHECK(no_truth.err.find("/nonexistent/t.csv") != std::string::npos);
  const Run no_settings = Command({"tune", "--config", "/nonexistent/s.yaml", "--input", in});
  CHECK(no_settings.rc == 2);
  CHECK(no_settings.err.find("/nonexistent/s.yaml: cannot open the settings file") !=
        std::string::npos);
}

TEST_CASE(
    "tune's recommended settings load, change only the chosen keys, and are kept by a "
    "second tune",
    "[integration]") {
  TempDir dir;
  const std::string feed = dir.File("feed.csv"), truth = dir.File("truth.csv");
  REQUIRE(Command({"simulate", "--series", "300", "--periods", "100", "--seed", "5", "--output",
                   feed, "--truth", truth})
              .rc == 0);
  // The demo's kinds of policy (simulate's key scheme), with small budgets so that the limits
  // of every candidate are derived quickly.
  const std::string settings_text =
      "# tuned below\n"
      "policies:\n"
      "  - name: slow-movers\n"
      "    match: \"*/sku-9*\"\n"
      "    period: week\n"
      "    method: sba\n"
      "    alpha: 0.1\n"
      "    warmup: 8\n"
      "    rules:\n"
      "      - {name: bias, signal: trigg, false_alert_every: 300, clear_fraction: 0.6}\n"
      "  - name: garden\n"
      "    match: \"north/*\"\n"
      "    period: week\n"
      "    alpha: 0.2\n"
      "    adaptive: {floor: 0.05, cap: 0.6}\n"
      "    start: {mean_of_first: 8}\n"
      "    warmup: 8\n"
      "    rules:\n"
      "      - {name: drift, signal: trigg, false_alert_every: 300, clear_fraction: 0.6}\n"
      "      - {name: pinned, signal: alpha_at_cap, periods: 6, severity: info}\n"
      "  - name: seasonal\n"
      "    match: \"*/sku-5*\"\n"
      "    period: week\n"
      "    method: seasonal-add\n"
      "    season_length: 52\n"
      "    start: {mean_of_first: 52}\n"
      "    rules:\n"
      "      - {name: spike, signal: error, limit: 4}\n"
      "  - name: stores\n"
      "    match: \"*\"\n"
      "    period: week\n"
      "    alpha: 0.1\n"
      "    start: {mean_of_first: 8}\n"
      "    warmup: 8\n"
      "    rules:\n"
      "      - {name: shift, signal: cusum, periods: 4, false_alert_every: 300}\n"
      "      - {name: spike, signal: error, limit: 4}\n";
  const std::string cfg = dir.Write("s.yaml", settings_text);
  const std::string rec = dir.File("rec.yaml"), report = dir.File("report.html");
  const std::string grid =
      dir.Write("g.yaml", "default: {alpha: [0.05, 0.2, 0.4], season_gamma: [0.3]}\n");
  const Run first =
      Command({"tune", "--config", cfg, "--input", feed, "--truth", truth, "--grid", grid,
               "--settings-out", rec, "--report", report, "--results", dir.File("r.csv")});
  INFO(first.err);
  REQUIRE(first.rc == 0);
  const config::LoadResult loaded = config::LoadSettingsFile(rec);
  REQUIRE(loaded.ok());
  // Only tuned keys differ: with their values masked and the lines that hold nothing else
  // left out, the two texts are the same, comments and layout included.
  CHECK(MaskTuned(TempDir::Read(rec)) == MaskTuned(settings_text));
  CHECK(TempDir::Read(rec) != settings_text);
  int kept = 0;
  for (std::size_t at = 0; (at = first.out.find("none (keep)", at)) != std::string::npos; ++at)
    ++kept;
  CHECK(kept < 4);  // something was changed, so the comparison above means something
  // Tuned again from its own recommendation, nothing better is left within the ceiling.
  const Run second =
      Command({"tune", "--config", rec, "--input", feed, "--truth", truth, "--grid", grid});
  INFO(second.out);
  REQUIRE(second.rc == 0);
  int again = 0;
  for (std::size_t at = 0; (at = second.out.find("none (keep)", at)) != std::string::npos; ++at)
    ++again;
  CHECK(again == 4);
  // The report stands alone: the chart library is inside it, nothing is fetched.
  const std::string html = TempDir::Read(report);
  CHECK(html.find("Dygraph") != std::string::npos);
  CHECK(html.find("<script src") == std::string::npos);
  CHECK(html.find("<link") == std::string::npos);
  CHECK(html.find("<img") == std::string::npos);
  int chosen = 0;
  for (std::size_t at = 0; (at = html.find("\"chosen\":true", at)) != std::string::npos; ++at)
    ++chosen;
  CHECK(chosen == 4);
}
