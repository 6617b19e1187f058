// The candidates `forewarden tune` tries for each policy: a grid of smoothing constants, the
// adaptive smoothing constant on or off with its bounds, and a scale on the policy's false-alert
// budgets, read from a YAML file (every key and its bounds: config/tune-grid.example.yaml) or
// the defaults per method below. The current value of every axis is always on it, first, so
// the policy as it is now is always a candidate.
#pragma once

#include <optional>
#include <string>
#include <utility>
#include <vector>

#include "config/load.h"
#include "config/settings.h"

namespace config {

struct GridAxes {
  std::vector<double> alpha, trend_beta, damping, season_gamma;
  std::vector<monitors::AdaptiveSpec> adaptive;  // `enabled` false: off
  std::vector<double> false_alert_scale;         // multiplies every false_alert_every
  // The alert rate a candidate may reach to be chosen, per 1,000 series-periods (alerts, or
  // false alerts with a truth file); unset: the current settings' own rate on the history.
  std::optional<double> max_alerts_per_1000;
  std::size_t candidates() const {
    return alpha.size() * trend_beta.size() * damping.size() * season_gamma.size() *
           adaptive.size() * false_alert_scale.size();
  }
};

struct TuneGrid {
  std::vector<std::pair<std::string, GridAxes>> policies;  // every policy, in settings order
  long max_candidates = 5000;                              // per policy
};

struct GridLoad {
  TuneGrid grid;
  std::vector<Problem> problems;
  bool ok() const { return problems.empty(); }
};

// `path` empty: the defaults alone. With a truth file (`with_truth`) the default budget scales
// are 0.5, 1 and 2, else 1 alone. Problems name the file, line, column and key.
GridLoad LoadTuneGrid(const std::string& path, const Settings& settings, bool with_truth);
GridLoad LoadTuneGridText(const std::string& text, const std::string& name,
                          const Settings& settings, bool with_truth);

// Every key the grid file takes, as paths ("default.alpha", "policies.NAME.adaptive[].cap").
std::vector<std::string> TuneGridKeys();

}  // namespace config
