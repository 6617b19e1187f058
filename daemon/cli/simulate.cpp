#include "daemon/cli/simulate.h"

#include <cmath>
#include <cstdio>
#include <cstring>
#include <random>
#include <vector>

#include "daemon/common/text_out.h"

namespace forewarden {
namespace {

class Rng {
 public:
  explicit Rng(std::uint64_t seed) : gen_(seed) {}
  double Uniform() { return static_cast<double>(gen_() >> 11) * 0x1.0p-53; }
  double Uniform(double lo, double hi) { return lo + (hi - lo) * Uniform(); }
  long Below(long n) { return static_cast<long>(Uniform() * static_cast<double>(n)); }
  double Normal() {  // Box-Muller
    double u1 = Uniform();
    while (u1 <= 0.0) u1 = Uniform();
    const double u2 = Uniform();
    return std::sqrt(-2.0 * std::log(u1)) * std::cos(2.0 * M_PI * u2);
  }

 private:
  std::mt19937_64 gen_;
};

enum class Kind { kSteady, kSeasonal, kSlow };
enum class Change { kNone, kStepUp, kStepDown, kTrendStart, kSpike };

const char* ChangeName(Change c) {
  switch (c) {
    case Change::kStepUp:
      return "step-up";
    case Change::kStepDown:
      return "step-down";
    case Change::kTrendStart:
      return "trend-start";
    case Change::kSpike:
      return "spike";
    case Change::kNone:
      break;
  }
  return "none";
}

struct SimSeries {
  std::string key;
  Kind kind;
  double level, cv, amplitude, phase, demand_chance;
  Change change = Change::kNone;
  long change_at = -1;
  double change_size = 0.0;
};

int SeasonPeriods(monitors::PeriodKind k) {
  switch (k) {
    case monitors::PeriodKind::kDay:
      return 7;  // a weekly shopping cycle
    case monitors::PeriodKind::kWeek:
      return 52;
    case monitors::PeriodKind::kMonth:
      return 12;
  }
  return 52;
}

}  // namespace

int RunSimulate(const SimulateOptions& o, std::string& error) {
  if (o.series < 1 || o.series > 100000000 || o.periods < 1 || o.periods > 100000) {
    error = "--series must be 1..100000000 and --periods 1..100000";
    return 2;
  }
  for (double share : {o.intermittent_share, o.seasonal_share, o.change_share})
    if (!(share >= 0.0 && share <= 1.0)) {
      error = "shares must be within [0, 1]";
      return 2;
    }
  if (!(o.level_min > 0.0 && o.level_max >= o.level_min && o.noise >= 0.0 && o.noise <= 2.0)) {
    error = "--level-min must be > 0 and <= --level-max; --noise within [0, 2]";
    return 2;
  }
  if (o.intermittent_share + o.seasonal_share > 1.0) {
    error = "--intermittent-share plus --seasonal-share must not exceed 1";
    return 2;
  }
  const monitors::PeriodParse first = monitors::ParsePeriod(o.period, o.start);
  if (!first.ok()) {
    error = "--start: " + first.error;
    return 2;
  }

  Rng rng(o.seed);
  static const char* const kRegions[] = {"north", "south", "east", "west"};
  std::vector<SimSeries> all(static_cast<std::size_t>(o.series));
  const int season = SeasonPeriods(o.period);
  for (long i = 0; i < o.series; ++i) {
    SimSeries& s = all[static_cast<std::size_t>(i)];
    const double u = rng.Uniform();
    s.kind = u < o.intermittent_share                      ? Kind::kSlow
             : u < o.intermittent_share + o.seasonal_share ? Kind::kSeasonal
                                                           : Kind::kSteady;
    const char* region = kRegions[i % 4];
    const long store = 1 + (i / 4) % 250;
    const long item = i / 1000;  // unique with region and store
    const long first_digit = s.kind == Kind::kSlow       ? 9
                             : s.kind == Kind::kSeasonal ? 5
                                                         : 1 + (i / 4) % 4;
    char key[96];
    std::snprintf(key, sizeof key, "%s/store-%03ld/sku-%ld%04ld", region, store, first_digit,
                  item % 10000);
    s.key = key;
    if (item >= 10000) s.key += "-" + std::to_string(item / 10000);
    s.level = std::exp(rng.Uniform(std::log(o.level_min), std::log(o.level_max)));
    s.cv = rng.Uniform(o.noise / 3.0, o.noise);
    s.amplitude = s.kind == Kind::kSeasonal ? rng.Uniform(0.2, 0.5) : 0.0;
    s.phase = rng.Uniform(0.0, 2.0 * M_PI);
    s.demand_chance = s.kind == Kind::kSlow ? rng.Uniform(0.1, 0.4) : 1.0;
    if (s.kind == Kind::kSlow) s.level = rng.Uniform(1.0, 8.0);
    if (rng.Uniform() < o.change_share && o.periods >= 8) {
      s.change = static_cast<Change>(1 + rng.Below(4));
      s.change_at = o.periods / 4 + rng.Below(o.periods - o.periods / 4);
      switch (s.change) {
        case Change::kStepUp:
          s.change_size = rng.Uniform(0.4, 0.8);
          break;
        case Change::kStepDown:
          s.change_size = -rng.Uniform(0.3, 0.6);
          break;
        case Change::kTrendStart:
          s.change_size = rng.Uniform(0.01, 0.03);
          break;
        case Change::kSpike:
          s.change_size = rng.Uniform(2.0, 4.0);
          break;
        case Change::kNone:
          break;
      }
    }
  }

  std::FILE* f = o.output == "-" ? stdout : std::fopen(o.output.c_str(), "wb");
  if (!f) {
    error = o.output + ": cannot create: " + std::strerror(errno);
    return 1;
  }
  bool ok = true;
  {
    TextOut out(f);
    out.Put("series,period,value\n");
    char period_text[16];
    for (long t = 0; t < o.periods; ++t) {
      const monitors::PeriodOrdinal p = first.ordinal + t;
      const std::string_view pt(period_text, static_cast<std::size_t>(monitors::FormatPeriodTo(
                                                 o.period, p, period_text)));
      for (SimSeries& s : all) {
        double mean = s.level;
        if (s.kind == Kind::kSeasonal)
          mean *=
              1.0 + s.amplitude * std::sin(2.0 * M_PI * static_cast<double>(t) / season + s.phase);
        if (s.change != Change::kNone && t >= s.change_at) {
          switch (s.change) {
            case Change::kStepUp:
            case Change::kStepDown:
              mean *= 1.0 + s.change_size;
              break;
            case Change::kTrendStart:
              mean *= 1.0 + s.change_size * static_cast<double>(t - s.change_at + 1);
              break;
            case Change::kSpike:
              if (t == s.change_at) mean *= 1.0 + s.change_size;
              break;
            case Change::kNone:
              break;
          }
        }
        double v = mean + s.cv * mean * rng.Normal();
        if (s.kind == Kind::kSlow && rng.Uniform() >= s.demand_chance) v = 0.0;
        v = std::max(0.0, std::round(v));
        out.Field(s.key);
        out.Put(',');
        out.Put(pt);
        out.Put(',');
        out.Number(v);
        out.EndLine();
      }
    }
    ok = out.Flush();
  }
  if (f != stdout)
    ok = std::fclose(f) == 0 && ok;
  else
    ok = std::fflush(f) == 0 && ok;
  if (!ok) {
    error = o.output + ": write failed: " + std::strerror(errno);
    return 1;
  }

  if (!o.truth.empty()) {
    std::FILE* tf = std::fopen(o.truth.c_str(), "wb");
    if (!tf) {
      error = o.truth + ": cannot create: " + std::strerror(errno);
      return 1;
    }
    {
      TextOut out(tf);
      // size: relative change of the mean (per period for trend-start); sigmas: the same in
      // units of the series' noise standard deviation (cv x mean before the change)
      out.Put("series,period,kind,size,sigmas\n");
      for (const SimSeries& s : all) {
        if (s.change == Change::kNone) continue;
        out.Field(s.key);
        out.Put(',');
        out.Put(monitors::FormatPeriod(o.period, first.ordinal + s.change_at));
        out.Put(',');
        out.Put(ChangeName(s.change));
        out.Put(',');
        out.Number(s.change_size);
        out.Put(',');
        out.Number(s.cv > 0 ? s.change_size / s.cv : 0.0);
        out.EndLine();
      }
      ok = out.Flush();
    }
    if (std::fclose(tf) != 0 || !ok) {
      error = o.truth + ": write failed";
      return 1;
    }
  }
  return 0;
}

}  // namespace forewarden
