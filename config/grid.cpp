#include "config/grid.h"

#include <algorithm>
#include <set>
#include <sstream>

#include "config/yaml_reader.h"

namespace config {

namespace {

using monitors::Method;

const std::set<std::string> kGridTopKeys = {"default", "policies", "max_candidates"};
const std::set<std::string> kAxisKeys = {"alpha",
                                         "trend_beta",
                                         "damping",
                                         "season_gamma",
                                         "adaptive",
                                         "false_alert_scale",
                                         "max_alerts_per_1000"};
const std::set<std::string> kAdaptiveKeys = {"floor", "cap", "lag"};
constexpr std::size_t kMaxAxisValues = 100;

// The defaults per method (common practice: the usual ranges of the constants for weekly
// retail series; a grid file replaces any of them).
GridAxes Defaults(const Policy& p, bool with_truth) {
  const monitors::PolicySpec& s = p.spec;
  GridAxes a;
  switch (s.method) {
    case Method::kSes:
      a.alpha = {0.05, 0.1, 0.15, 0.2, 0.3, 0.4, 0.5};
      break;
    case Method::kHolt:
    case Method::kDamped:
      a.alpha = {0.05, 0.1, 0.2, 0.3};
      a.trend_beta = {0.02, 0.05, 0.1};
      if (s.method == Method::kDamped) a.damping = {0.85, 0.9, 0.95};
      break;
    case Method::kSeasonalAdd:
    case Method::kSeasonalMul:
      a.alpha = {0.05, 0.1, 0.2, 0.3};
      a.season_gamma = {0.05, 0.1, 0.2, 0.3};
      break;
    case Method::kCroston:
    case Method::kSba:
      a.alpha = {0.05, 0.1, 0.15, 0.2, 0.3};
      break;
  }
  if (!monitors::IsIntermittent(s.method)) {
    monitors::AdaptiveSpec on = s.adaptive;
    if (!on.enabled) on = {true, 0.05, 0.6, true};
    a.adaptive = {monitors::AdaptiveSpec{}, on};
  }
  if (with_truth && !p.calibrations.empty()) a.false_alert_scale = {0.5, 1.0, 2.0};
  return a;
}

bool TakesTrend(Method m) {
  return monitors::HasTrend(m);
}
bool TakesDamping(Method m) {
  return m == Method::kDamped || monitors::IsSeasonal(m);
}
bool HasCapRule(const monitors::PolicySpec& s) {
  return std::any_of(s.rules.begin(), s.rules.end(), [](const monitors::RuleSpec& r) {
    return r.signal == monitors::SignalKind::kAlphaAtCap;
  });
}

// Puts `current` first and drops repeats.
void WithCurrent(std::vector<double>& axis, double current) {
  std::vector<double> out{current};
  for (double v : axis)
    if (std::find(out.begin(), out.end(), v) == out.end()) out.push_back(v);
  axis = std::move(out);
}

class GridReader {
 public:
  GridReader(YamlReader& r, const Settings& settings) : r_(r), settings_(settings) {}

  // Reads the axes given in `n` into `a`. `own`: the policy's own section (a key that does not
  // apply to the policy is a problem there; from `default:` it is left out for that policy).
  void ReadAxes(const YAML::Node& n, const std::string& path, const Policy* p, bool own,
                GridAxes& a) {
    if (!n.IsMap()) {
      r_.Add(n, path, "must be a map of axes (" + Known(kAxisKeys) + ")");
      return;
    }
    r_.CheckKeys(n, path, kAxisKeys);
    const Method m = p ? p->spec.method : Method::kSes;
    Numbers(n, path, "alpha", 0.0, 1.0, a.alpha, true, own);
    Numbers(n, path, "trend_beta", 0.0, 1.0, a.trend_beta, !p || TakesTrend(m), own,
            "has no trend");
    Numbers(n, path, "damping", 0.0, 1.0, a.damping, !p || TakesDamping(m), own,
            "has no damping (use method damped)");
    Numbers(n, path, "season_gamma", 0.0, 1.0, a.season_gamma, !p || monitors::IsSeasonal(m), own,
            "has no seasons");
    const bool budgets = !p || !p->calibrations.empty();
    Numbers(n, path, "false_alert_scale", 0.0, 100.0, a.false_alert_scale, budgets, own,
            "has no rule with false_alert_every");
    if (p && budgets && n["false_alert_scale"].IsDefined()) {
      for (double scale : a.false_alert_scale)
        for (const auto& c : p->calibrations)
          if (c.every * scale < 2.0 || c.every * scale > 100000.0) {
            std::ostringstream msg;
            msg << "scale " << scale << " takes rule '" << c.rule << "' (false_alert_every "
                << c.every << ") outside [2, 100000]";
            r_.Add(n["false_alert_scale"], path + ".false_alert_scale", msg.str());
          }
    }
    if (n["max_alerts_per_1000"].IsDefined()) {
      double v = 0;
      r_.Range(n, "max_alerts_per_1000", path, v, 0.0, false, 1000.0, false);
      a.max_alerts_per_1000 = v;
    }
    const YAML::Node ad = n["adaptive"];
    if (!ad.IsDefined()) return;
    const std::string ap = path + ".adaptive";
    if (p && monitors::IsIntermittent(m)) {
      if (own) r_.Add(ad, ap, "policy '" + p->name + "' (croston/sba) takes no adaptive alpha");
      return;
    }
    std::vector<YAML::Node> items;
    if (!Items(ad, ap, items)) return;
    std::vector<monitors::AdaptiveSpec> out;
    for (std::size_t i = 0; i < items.size(); ++i) {
      const YAML::Node it = items[i];
      const std::string ip = ap + "[" + std::to_string(i) + "]";
      if (it.IsScalar() && (it.Scalar() == "off" || it.Scalar() == "false")) {
        if (p && HasCapRule(p->spec)) {
          if (own)
            r_.Add(it, ip,
                   "policy '" + p->name + "' has an alpha_at_cap rule, which needs adaptive on");
          continue;
        }
        out.push_back(monitors::AdaptiveSpec{});
        continue;
      }
      if (!it.IsMap()) {
        r_.Add(it, ip, "must be off or a map {floor, cap, lag}");
        continue;
      }
      r_.CheckKeys(it, ip, kAdaptiveKeys);
      monitors::AdaptiveSpec s{true, 0.05, 0.8, true};
      const std::size_t before = r_.problems().size();
      r_.Range(it, "floor", ip, s.floor, 0.0, false, 1.0, false);
      r_.Range(it, "cap", ip, s.cap, 0.0, true, 1.0, false);
      if (it["lag"].IsDefined()) r_.Bool(it["lag"], ip + ".lag", s.lagged);
      if (s.floor > s.cap) r_.Add(it, ip, "floor must not be above cap");
      if (r_.problems().size() == before) out.push_back(s);
    }
    if (!out.empty()) a.adaptive = std::move(out);
  }

 private:
  static std::string Known(const std::set<std::string>& keys) {
    std::string list;
    for (const auto& k : keys) list += (list.empty() ? "" : ", ") + k;
    return list;
  }

  // The values of an axis: a list, or one value; false (a problem added) when it lists none or
  // more than kMaxAxisValues.
  bool Items(const YAML::Node& v, const std::string& path, std::vector<YAML::Node>& items) {
    items.clear();
    if (v.IsSequence()) {
      for (std::size_t i = 0; i < v.size(); ++i) items.push_back(v[i]);
    } else {
      items.push_back(v);
    }
    if (items.empty() || items.size() > kMaxAxisValues) {
      r_.Add(v, path, "must list 1 to " + std::to_string(kMaxAxisValues) + " values");
      return false;
    }
    return true;
  }

  // A list of numbers (or one number) in (lo, hi].
  void Numbers(const YAML::Node& n, const std::string& path, const char* key, double lo, double hi,
               std::vector<double>& out, bool applies, bool own, const char* why_not = "") {
    const YAML::Node v = n[key];
    if (!v.IsDefined()) return;
    const std::string kp = path + "." + key;
    if (!applies) {
      if (own) r_.Add(v, kp, std::string("this policy ") + why_not);
      return;
    }
    std::vector<YAML::Node> items;
    if (!Items(v, kp, items)) return;
    std::vector<double> values;
    for (std::size_t i = 0; i < items.size(); ++i) {
      double x = 0;
      const std::string ip = kp + "[" + std::to_string(i) + "]";
      if (!r_.Double(items[i], ip, x)) continue;
      if (!(x > lo && x <= hi)) {
        std::ostringstream msg;
        msg << "must be in (" << lo << ", " << hi << "], got " << items[i].Scalar();
        r_.Add(items[i], ip, msg.str());
        continue;
      }
      values.push_back(x);
    }
    if (values.size() == items.size()) out = std::move(values);
  }

  YamlReader& r_;
  const Settings& settings_;
};

}  // namespace

std::vector<std::string> TuneGridKeys() {
  std::vector<std::string> keys = {"max_candidates"};
  for (const char* section : {"default", "policies.NAME"})
    for (const auto& k : kAxisKeys) {
      keys.push_back(std::string(section) + "." + k);
      if (k == "adaptive")
        for (const auto& a : kAdaptiveKeys)
          keys.push_back(std::string(section) + ".adaptive[]." + a);
    }
  return keys;
}

GridLoad LoadTuneGridText(const std::string& text, const std::string& name,
                          const Settings& settings, bool with_truth) {
  GridLoad out;
  YamlReader r(name);
  YAML::Node root;
  bool parsed = true;
  if (!text.empty()) {
    try {
      root = YAML::Load(text);
    } catch (const YAML::Exception& e) {
      Problem p;
      p.file = name;
      p.line = e.mark.line + 1;
      p.column = e.mark.column + 1;
      p.message = "not valid YAML: " + e.msg;
      out.problems.push_back(p);
      return out;
    }
    if (!root.IsNull() && !root.IsMap()) {
      r.Add(root, "", "the grid must be a map (default, policies, max_candidates)");
      parsed = false;
    }
  }
  const bool have = parsed && root.IsMap();
  if (have) r.CheckKeys(root, "", kGridTopKeys);
  if (have) r.Int(root, "max_candidates", "", out.grid.max_candidates, 1, 1000000);
  GridReader g(r, settings);
  YAML::Node defaults, own;
  if (have && root["default"].IsDefined()) {
    defaults.reset(root["default"]);
    GridAxes check;  // the section alone: ranges and keys
    g.ReadAxes(defaults, "default", nullptr, false, check);
  }
  if (have && root["policies"].IsDefined()) {
    own.reset(root["policies"]);
    if (!own.IsMap()) {
      r.Add(own, "policies", "must be a map from policy name to its axes");
      own.reset();
    } else {
      for (auto it = own.begin(); it != own.end(); ++it) {
        const std::string pname = it->first.Scalar();
        const bool known = std::any_of(settings.policies.begin(), settings.policies.end(),
                                       [&](const Policy& p) { return p.name == pname; });
        if (!known)
          r.Add(it->first, "policies." + pname, "no policy of the settings has this name");
      }
    }
  }
  const YAML::Node& sections = own;  // const: a lookup must not add a key
  for (const Policy& p : settings.policies) {
    GridAxes a = Defaults(p, with_truth);
    const std::size_t quiet = r.problems().size();
    if (defaults.IsDefined()) {
      g.ReadAxes(defaults, "default", &p, false, a);
      r.problems().resize(quiet);  // reported once above, for the section alone
    }
    const std::string ppath = "policies." + p.name;
    if (sections.IsDefined() && sections.IsMap() && sections[p.name].IsDefined())
      g.ReadAxes(sections[p.name], ppath, &p, true, a);
    const monitors::PolicySpec& s = p.spec;
    const Method m = s.method;
    WithCurrent(a.alpha, s.constants.alpha);
    if (TakesTrend(m))
      WithCurrent(a.trend_beta, s.constants.beta);
    else
      a.trend_beta = {s.constants.beta};
    if (TakesDamping(m))
      WithCurrent(a.damping, s.constants.phi);
    else
      a.damping = {s.constants.phi};
    if (monitors::IsSeasonal(m))
      WithCurrent(a.season_gamma, s.constants.gamma);
    else
      a.season_gamma = {s.constants.gamma};
    WithCurrent(a.false_alert_scale, 1.0);
    if (p.calibrations.empty()) a.false_alert_scale = {1.0};
    std::vector<monitors::AdaptiveSpec> ad{s.adaptive};
    if (!monitors::IsIntermittent(m))
      for (const auto& v : a.adaptive)
        if (std::none_of(ad.begin(), ad.end(),
                         [&](const auto& x) { return monitors::SameAdaptive(x, v); }))
          ad.push_back(v);
    if (HasCapRule(s))  // an alpha_at_cap rule needs adaptive on
      ad.erase(std::remove_if(ad.begin(), ad.end(), [](const auto& x) { return !x.enabled; }),
               ad.end());
    a.adaptive = std::move(ad);
    if (a.candidates() > static_cast<std::size_t>(out.grid.max_candidates)) {
      const YAML::Node at = sections.IsDefined() && sections.IsMap() && sections[p.name].IsDefined()
                                ? sections[p.name]
                                : (defaults.IsDefined() ? defaults : root);
      r.Add(at, ppath,
            std::to_string(a.candidates()) + " candidates for policy '" + p.name +
                "'; max_candidates is " + std::to_string(out.grid.max_candidates));
    }
    out.grid.policies.emplace_back(p.name, std::move(a));
  }
  out.problems = std::move(r.problems());
  return out;
}

GridLoad LoadTuneGrid(const std::string& path, const Settings& settings, bool with_truth) {
  if (path.empty()) return LoadTuneGridText("", "(default grid)", settings, with_truth);
  std::string text;
  GridLoad out;
  if (!ReadConfigFile(path, "grid", text, out.problems)) return out;
  return LoadTuneGridText(text, path, settings, with_truth);
}

}  // namespace config
