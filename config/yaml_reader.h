// The YAML reader the settings loader and the tune grid loader share: typed reads of scalars
// with ranges, unknown keys, and every problem collected with file, line, column and key path.
// Internal to config/ (yaml-cpp does not leave this folder).
#pragma once

#include <yaml-cpp/yaml.h>

#include <cctype>
#include <cmath>
#include <fstream>
#include <set>
#include <sstream>
#include <string>
#include <vector>

#include "config/load.h"

namespace config {

// The whole file at `path` in `text`; false, with the problem "cannot open the WHAT file" added
// to `problems`, when it cannot be read.
inline bool ReadConfigFile(const std::string& path, const char* what, std::string& text,
                           std::vector<Problem>& problems) {
  std::ifstream in(path, std::ios::binary);
  if (!in) {
    Problem p;
    p.file = path;
    p.message = std::string("cannot open the ") + what + " file";
    problems.push_back(p);
    return false;
  }
  std::ostringstream all;
  all << in.rdbuf();
  text = all.str();
  return true;
}

class YamlReader {
 public:
  explicit YamlReader(std::string file) : file_(std::move(file)) {}

  void Add(const YAML::Node& at, const std::string& path, const std::string& message) {
    Problem p;
    p.file = file_;
    if (at.IsDefined()) {
      const YAML::Mark m = at.Mark();
      if (m.line >= 0) {
        p.line = m.line + 1;
        p.column = m.column + 1;
      }
    }
    p.path = path;
    p.message = message;
    problems_.push_back(std::move(p));
  }

  // Reports keys of `map` that are not in `known`.
  void CheckKeys(const YAML::Node& map, const std::string& path,
                 const std::set<std::string>& known) {
    for (auto it = map.begin(); it != map.end(); ++it) {
      const std::string key = it->first.Scalar();
      if (!known.count(key)) {
        std::string list;
        for (const auto& k : known) list += (list.empty() ? "" : ", ") + k;
        Add(it->first, Join(path, key), "unknown key (known keys: " + list + ")");
      }
    }
  }

  static std::string Join(const std::string& path, const std::string& key) {
    return path.empty() ? key : path + "." + key;
  }

  bool Double(const YAML::Node& n, const std::string& path, double& out) {
    if (!n.IsScalar()) {
      Add(n, path, "must be a number");
      return false;
    }
    try {
      out = n.as<double>();
    } catch (const YAML::Exception&) {
      Add(n, path, "must be a number, got '" + n.Scalar() + "'");
      return false;
    }
    if (!std::isfinite(out)) {
      Add(n, path, "must be a finite number, got '" + n.Scalar() + "'");
      return false;
    }
    return true;
  }

  // Reads an optional number within [lo, hi] (open ends when lo_open / hi_open).
  void Range(const YAML::Node& map, const std::string& key, const std::string& path, double& out,
             double lo, bool lo_open, double hi, bool hi_open) {
    const YAML::Node n = map[key];
    if (!n.IsDefined()) return;
    double v = 0;
    if (!Double(n, Join(path, key), v)) return;
    const bool bad = (lo_open ? v <= lo : v < lo) || (hi_open ? v >= hi : v > hi);
    if (bad) {
      std::ostringstream msg;
      msg << "must be in " << (lo_open ? '(' : '[') << lo << ", " << hi << (hi_open ? ')' : ']')
          << ", got " << n.Scalar();
      Add(n, Join(path, key), msg.str());
      return;
    }
    out = v;
  }

  void Int(const YAML::Node& map, const std::string& key, const std::string& path, long& out,
           long lo, long hi) {
    const YAML::Node n = map[key];
    if (!n.IsDefined()) return;
    long v = 0;
    try {
      if (!n.IsScalar()) throw YAML::Exception(n.Mark(), "not a scalar");
      v = n.as<long>();
    } catch (const YAML::Exception&) {
      Add(n, Join(path, key), "must be a whole number, got '" + n.Scalar() + "'");
      return;
    }
    if (v < lo || v > hi) {
      Add(n, Join(path, key),
          "must be in [" + std::to_string(lo) + ", " + std::to_string(hi) + "], got " + n.Scalar());
      return;
    }
    out = v;
  }

  // A boolean with the words yaml-cpp's own conversion takes (y, yes, true, on / n, no, false,
  // off; all lower case, all upper case or capitalised), read here because that conversion is
  // not safe to call from two threads at once (it writes a shared buffer; `tune` loads
  // settings on every core).
  bool Bool(const YAML::Node& n, const std::string& path, bool& out) {
    static const char* const kTrue[] = {"y", "yes", "true", "on"};
    static const char* const kFalse[] = {"n", "no", "false", "off"};
    if (n.IsScalar()) {
      const std::string& t = n.Scalar();
      std::string lower = t;
      for (char& c : lower) c = static_cast<char>(std::tolower(static_cast<unsigned char>(c)));
      std::string upper = lower, capital = lower;
      for (char& c : upper) c = static_cast<char>(std::toupper(static_cast<unsigned char>(c)));
      if (!capital.empty())
        capital[0] = static_cast<char>(std::toupper(static_cast<unsigned char>(capital[0])));
      const bool cased = t == lower || t == upper || t == capital;
      for (const char* w : kTrue)
        if (cased && lower == w) return out = true, true;
      for (const char* w : kFalse)
        if (cased && lower == w) return out = false, true;
    }
    Add(n, path, "must be true or false");
    return false;
  }

  bool String(const YAML::Node& n, const std::string& path, std::string& out) {
    if (!n.IsScalar()) {
      Add(n, path, "must be a string");
      return false;
    }
    out = n.Scalar();
    return true;
  }

  std::vector<Problem>& problems() { return problems_; }

 private:
  std::string file_;
  std::vector<Problem> problems_;
};

}  // namespace config
