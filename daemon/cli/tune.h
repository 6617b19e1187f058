// `forewarden tune`: chooses each policy's smoothing constants, adaptive smoothing constant and
// false-alert budgets from history. The history is read once (through the same reader as
// replay, so it is refused exactly as replay refuses it) and kept in memory; every candidate of
// every policy's grid (config/grid.h) is then run over that policy's series with the service's
// own step and rules, the limits of calibrated rules derived again for the candidate's
// constants by the settings loader itself, on every core.
//
// Per candidate: one-step accuracy over the periods the rules watch (past each series' start
// and warm-up): MAE, RMSE, MASE (Hyndman and Koehler 2006: each error over the in-sample mean
// absolute error of the naive forecast of the series' own rows, seasonal naive for seasonal
// methods, pooled over the policy's series), the mean error (bias), alerts opened per 1,000
// series-periods, and with a truth file (series,period,kind: `simulate --truth`) false alerts
// per 1,000 series-periods before each series' change, the share of changes caught within 13
// periods and the median delay.
//
// The choice per policy (README, "tune"): among the candidates whose alert rate (false alert
// rate with a truth file) is no higher than the ceiling (the grid's max_alerts_per_1000, else
// the current settings' own rate on the same history), the lowest MASE; ties go to more changes
// caught, then to the current budgets, then to fewer alerts. The current settings are always a
// candidate, so a policy is left as it is when nothing beats it.
#pragma once

#include <iosfwd>
#include <string>

#include "config/settings.h"
#include "daemon/common/status.h"

namespace forewarden {

struct TuneOptions {
  std::string config;        // the settings file (its text is what the recommendation edits)
  std::string input;         // history CSV, as replay reads it ("-": standard input)
  std::string truth;         // optional: series,period,kind of known changes
  std::string grid;          // optional: the grid file (else the defaults)
  std::string results;       // optional: every candidate's figures as CSV
  std::string settings_out;  // optional: the recommended settings (YAML)
  std::string report;        // optional: a self-contained HTML report with a chart per policy
  int threads = 0;           // 0: every core
  bool progress = false;     // progress lines on standard error (when it is a terminal)
};

struct TuneSummary {
  long series = 0;
  long actuals = 0;
  long candidates = 0;
  long changed_policies = 0;
  double read_seconds = 0, prepare_seconds = 0, evaluate_seconds = 0;
  double candidate_actuals = 0;  // actuals run through a candidate, summed over candidates
};

// Runs the whole tune. `out` gets the short table; `err` the progress. Invalid on bad input
// (settings, grid, history, truth: the message names the file, line and field), io when a file
// cannot be read or written.
Result<TuneSummary> RunTune(const config::Settings& settings, const std::string& settings_text,
                            const TuneOptions& options, std::ostream& out, std::ostream& err);

std::string FormatTuneSummary(const TuneSummary& summary);

}  // namespace forewarden
