// The read view: what lists, sorts and counts need of every series, copied by the engine at a
// batch boundary, so readers filter and sort a million series on their own thread while the
// engine goes on applying batches (ARCHITECTURE.md, "Reads").
//
// A view is consistent: every row is the state after the same batch. It is immutable once
// published and shared (`std::shared_ptr<const ReadView>`); the engine makes a new one only
// when something changed since the last (a batch, housekeeping, a reset, a reload), copying
// 20 bytes a series and recomputing only the rows of series that changed. Keys and label sets
// never change once a series exists, so their table is shared between views and copied only
// when series were added.
#pragma once

#include <cmath>
#include <cstdint>
#include <memory>
#include <string>
#include <string_view>
#include <vector>

#include "config/settings.h"
#include "monitors/period.h"

namespace forewarden {

struct ReadRow {
  static constexpr std::uint8_t kActive = 1;   // a rule holds
  static constexpr std::uint8_t kWarming = 2;  // start window or warm-up
  static constexpr std::uint8_t kSeen = 4;     // has an actual
  float trigg = NAN;                           // Trigg's signal (NaN: undefined, or warming)
  float cusum = NAN;                           // the cumulative signal
  // The largest Trigg or plain cumulative signal over its rule's limit, at least 1 for a rule
  // that holds or was beyond its limit last period (api/attention.h); 0 while warming.
  float closeness = 0;
  std::int32_t last_period = 0;  // period ordinal of the last actual (with kSeen)
  std::uint16_t policy = 0;      // index into settings->policies
  std::uint8_t flags = 0;
  std::int8_t nearest = -1;  // the rule of `closeness`, -1: none
};

// Keys and label sets by series index (immutable per index).
struct ReadIdentity {
  std::vector<std::string_view> keys;   // into the engine's key arena, which never moves
  std::vector<std::uint32_t> labels;    // index into label_sets
  std::vector<std::string> label_sets;  // JSON object text
  std::shared_ptr<const void> arena;    // keeps the key arena alive (it is replaced on reseat)
};

struct ReadView {
  std::uint64_t version = 0;                         // the engine's change count when taken
  std::int64_t today = 0;                            // days since 1970-01-01 when taken (staleness)
  std::shared_ptr<const config::Settings> settings;  // the policies `policy` indexes
  std::vector<ReadRow> rows;                         // by series index
  std::shared_ptr<const ReadIdentity> identity;      // at least rows.size() entries

  std::size_t size() const { return rows.size(); }
  std::string_view key(std::size_t i) const { return identity->keys[i]; }
  std::string_view labels(std::size_t i) const { return identity->label_sets[identity->labels[i]]; }
  const config::Policy& policy(std::size_t i) const { return settings->policies[rows[i].policy]; }
  // No actual for more periods than the policy's stale_after, by the view's day.
  bool stale(std::size_t i) const {
    const ReadRow& r = rows[i];
    if (!(r.flags & ReadRow::kSeen)) return false;
    const config::Policy& p = policy(i);
    return monitors::PeriodOfDay(p.period, today) - r.last_period - 1 >= p.stale_after;
  }
};

}  // namespace forewarden
