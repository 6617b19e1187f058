// Loading settings from YAML. Every problem is collected (not just the first), each with the
// file, line, column and key path, e.g.
//   demo.yaml:14:12: policies[0].alpha: must be in (0, 1], got 1.5
#pragma once

#include <string>
#include <vector>

#include "config/settings.h"

namespace config {

struct Problem {
  std::string file;
  int line = 0;    // 1-based; 0 when unknown
  int column = 0;  // 1-based
  std::string path;
  std::string message;
  std::string ToString() const;
};

struct LoadResult {
  Settings settings;
  std::vector<Problem> problems;
  bool ok() const { return problems.empty(); }
};

// `text`, when given, receives the file's text (what `tune` edits for its recommendation).
LoadResult LoadSettingsFile(const std::string& path, std::string* text = nullptr);

// Every key the loader takes, as paths: "server.listen", "policies[].rules[].limit", ...
std::vector<std::string> SettingsKeys();
// `name` stands for the file in messages.
LoadResult LoadSettingsText(const std::string& text, const std::string& name);

}  // namespace config
