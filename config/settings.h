// forewarden settings as plain, validated structs. Produced by LoadSettings (load.h) from YAML;
// nothing outside config/ sees yaml-cpp. Immutable once loaded: share freely between threads.
#pragma once

#include <string>
#include <utility>
#include <vector>

#include "monitors/period.h"
#include "monitors/series.h"

namespace config {

// Which series a policy takes: a glob on the series key ('*' any run of characters, '/'
// included; '?' one character) and, optionally, labels that must all be present and equal.
struct Match {
  std::string key = "*";
  std::vector<std::pair<std::string, std::string>> labels;
};

struct Policy {
  std::string name;
  Match match;
  monitors::PeriodKind period = monitors::PeriodKind::kWeek;
  monitors::PolicySpec spec;
};

struct Settings {
  std::vector<Policy> policies;  // first match wins
};

// True when `key` matches the glob `pattern`.
bool GlobMatch(std::string_view pattern, std::string_view key);

// The first policy whose match fits the key and labels, or nullptr.
const Policy* FindPolicy(const Settings& settings, std::string_view key,
                         const std::vector<std::pair<std::string, std::string>>& labels = {});

}  // namespace config
