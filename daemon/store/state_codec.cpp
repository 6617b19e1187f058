#include "daemon/store/state_codec.h"

#include <cstdint>
#include <cstring>

namespace forewarden {
namespace {

// 1: the first version (with the series' first period); 2: without it; 3: rule episodes
// (quiet periods, open, escalated), the bias/accuracy/cusum window, and only alpha unless the
// series owns its constants (flag 8: fitted).
constexpr std::uint8_t kVersion = 3;

class Writer {
 public:
  template <typename T>
  void Put(T v) {
    char b[sizeof(T)];
    std::memcpy(b, &v, sizeof(T));
    out.append(b, sizeof(T));
  }
  void Doubles(const std::vector<double>& v) {
    Put(static_cast<std::uint32_t>(v.size()));
    for (double d : v) Put(d);
  }
  std::string out;
};

class Reader {
 public:
  explicit Reader(std::string_view in) : in_(in) {}
  template <typename T>
  bool Get(T& v) {
    if (in_.size() < sizeof(T)) return false;
    std::memcpy(&v, in_.data(), sizeof(T));
    in_.remove_prefix(sizeof(T));
    return true;
  }
  bool Doubles(std::vector<double>& v) {
    std::uint32_t n = 0;
    if (!Get(n) || in_.size() < static_cast<std::size_t>(n) * sizeof(double)) return false;
    v.resize(n);
    for (double& d : v) Get(d);
    return true;
  }
  bool done() const { return in_.empty(); }

 private:
  std::string_view in_;
};

}  // namespace

std::string EncodeState(const monitors::SeriesState& s) {
  Writer w;
  w.Put(kVersion);
  const monitors::Constants* own = s.own.get();
  const std::uint8_t flags = static_cast<std::uint8_t>(
      (s.seen ? 1 : 0) | (s.started ? 2 : 0) | (s.model.has_demand ? 4 : 0) | (own ? 8 : 0));
  w.Put(flags);
  w.Put<std::int64_t>(s.last_period);
  w.Put<std::int64_t>(s.next_index);
  w.Doubles(s.window.values());
  w.Put(s.alpha);
  if (own) {
    w.Put(own->beta);
    w.Put(own->phi);
    w.Put(own->gamma);
    w.Put<std::int32_t>(own->season_length);
  }
  w.Put(s.model.level);
  w.Put(s.model.trend);
  w.Doubles(s.model.season);
  w.Put(s.model.size);
  w.Put(s.model.interval);
  w.Put<std::int64_t>(s.model.since_demand);
  w.Put(s.stats.smoothed_error);
  w.Put(s.stats.mad);
  w.Put(s.stats.cusum);
  w.Put<std::int64_t>(s.forecasts);
  w.Put<std::int64_t>(s.missing);
  w.Put(static_cast<std::uint32_t>(s.rules.size()));
  for (const auto& r : s.rules) {
    w.Put<std::int32_t>(r.run);
    w.Put<std::uint8_t>(
        static_cast<std::uint8_t>((r.active ? 1 : 0) | (r.open ? 2 : 0) | (r.escalated ? 4 : 0)));
    w.Put<std::uint8_t>(r.quiet);
  }
  w.Put<std::uint64_t>(s.active);
  w.Put<std::uint16_t>(s.recent.capacity());
  const std::vector<float> recent = s.recent.Values();
  w.Put(static_cast<std::uint32_t>(recent.size()));
  for (float v : recent) w.Put(v);
  return std::move(w.out);
}

bool DecodeState(std::string_view bytes, monitors::SeriesState& out) {
  Reader r(bytes);
  monitors::SeriesState s;
  std::uint8_t version = 0, flags = 0;
  std::int64_t first = 0, last = 0, next = 0, since = 0, forecasts = 0, missing = 0;
  std::int32_t season_length = 0;
  std::uint32_t nrules = 0;
  std::vector<double> window;
  monitors::Constants own;
  bool has_own = false;
  if (!r.Get(version) || version < 1 || version > kVersion || !r.Get(flags) ||
      (version == 1 && !r.Get(first)) || !r.Get(last) || !r.Get(next) || !r.Doubles(window) ||
      !r.Get(s.alpha))
    return false;
  // Before format 3 every state carried its constants: they become its own, and the engine
  // drops them again for series whose policy does not fit constants (FitConstants).
  has_own = version < 3 || (flags & 8);
  if (has_own) {
    own.alpha = s.alpha;
    if (!r.Get(own.beta) || !r.Get(own.phi) || !r.Get(own.gamma) || !r.Get(season_length))
      return false;
    own.season_length = season_length;
    s.own.set(own);
  }
  if (!r.Get(s.model.level) || !r.Get(s.model.trend) || !r.Doubles(s.model.season) ||
      !r.Get(s.model.size) || !r.Get(s.model.interval) || !r.Get(since) ||
      !r.Get(s.stats.smoothed_error) || !r.Get(s.stats.mad) || !r.Get(s.stats.cusum) ||
      !r.Get(forecasts) || !r.Get(missing) || !r.Get(nrules) || nrules > monitors::kMaxRules)
    return false;
  s.rules.resize(nrules);
  for (auto& rule : s.rules) {
    std::int32_t run = 0;
    std::uint8_t bits = 0;
    if (!r.Get(run) || !r.Get(bits) || run < 0 || run > UINT16_MAX) return false;
    if (version >= 3 && !r.Get(rule.quiet)) return false;  // one byte
    rule.run = static_cast<std::uint16_t>(run);
    rule.active = bits & 1;
    // before version 3 a holding rule was its own episode
    rule.open = version >= 3 ? (bits & 2) != 0 : rule.active;
    rule.escalated = bits & 4;
  }
  if (!r.Get(s.active)) return false;
  if (version >= 3) {
    std::uint16_t capacity = 0;
    std::uint32_t n = 0;
    constexpr std::uint32_t k = monitors::RecentWindow::kFields;
    if (!r.Get(capacity) || !r.Get(n) || n % k != 0 || n / k > capacity) return false;
    for (std::uint32_t i = 0; i < n; i += k) {
      float e = 0, a = 0, m = 0;
      if (!r.Get(e) || !r.Get(a) || !r.Get(m)) return false;
      s.recent.Push(capacity, e, a, m);
    }
  }
  if (!r.done()) return false;
  for (std::int64_t v : {since, forecasts, missing})
    if (v < 0 || v > INT32_MAX) return false;
  s.seen = flags & 1;
  s.started = flags & 2;
  s.model.has_demand = flags & 4;
  s.window.assign(std::move(window));
  s.last_period = last;
  s.next_index = static_cast<long>(next);
  s.model.since_demand = static_cast<std::int32_t>(since);
  s.forecasts = static_cast<std::int32_t>(forecasts);
  s.missing = static_cast<std::int32_t>(missing);
  out = std::move(s);
  return true;
}

}  // namespace forewarden
