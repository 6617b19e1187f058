#include "config/settings.h"

namespace config {

bool GlobMatch(std::string_view p, std::string_view s) {
  std::size_t pi = 0, si = 0, star = std::string_view::npos, mark = 0;
  while (si < s.size()) {
    if (pi < p.size() && (p[pi] == '?' || p[pi] == s[si])) {
      ++pi;
      ++si;
    } else if (pi < p.size() && p[pi] == '*') {
      star = pi++;
      mark = si;
    } else if (star != std::string_view::npos) {
      pi = star + 1;
      si = ++mark;
    } else {
      return false;
    }
  }
  while (pi < p.size() && p[pi] == '*') ++pi;
  return pi == p.size();
}

const Policy* FindPolicy(const Settings& settings, std::string_view key,
                         const std::vector<std::pair<std::string, std::string>>& labels) {
  for (const Policy& p : settings.policies) {
    if (!GlobMatch(p.match.key, key)) continue;
    bool all = true;
    for (const auto& [name, value] : p.match.labels) {
      bool found = false;
      for (const auto& [n, v] : labels)
        if (n == name && v == value) found = true;
      if (!found) all = false;
    }
    if (all) return &p;
  }
  if (!settings.fallback_policy.empty())
    for (const Policy& p : settings.policies)
      if (p.name == settings.fallback_policy) return &p;
  return nullptr;
}

}  // namespace config
