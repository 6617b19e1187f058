// The alert book: alerts as episodes with a lifecycle, kept in the store's database.
//
// An alert is one episode of one rule on one series (monitors/rule.h) with a stable id:
//   open -> acknowledged (who, note) | snoozed (until a period or a time) -> resolved
// Resolution is automatic (the episode ended: the rule stayed clear for resolve_after periods),
// by a forecast reset, by a restatement that removes the episode, or by hand. An escalation of
// an acknowledged or snoozed alert returns it to open and notifies again; a snooze that ends
// while the alert is open notifies again.
//
// Every change is an event row (the alert's history) written in the caller's transaction, so it
// commits or rolls back with the state change that caused it; an event that notifies gets one
// delivery row per sink: the transactional outbox that delivery.h drains. Storms: when more
// than `storm_threshold` series of one policy open the same rule in one batch, the members are
// recorded as usual but one grouped event notifies instead of one each; the group resolves
// when its last member does.
//
// Engine thread only. The in-memory map of unresolved alerts follows the database through an
// undo log: Mark() before a savepoint, RollbackTo(mark) with it, Forget() after the commit.
#pragma once

#include <cstdint>
#include <functional>
#include <optional>
#include <string>
#include <unordered_map>
#include <utility>
#include <vector>

#include "config/settings.h"
#include "daemon/common/status.h"
#include "daemon/store/sqlite.h"
#include "monitors/rule.h"

namespace forewarden {

// What one step did to one rule's episode, as the engine hands it over.
struct AlertChange {
  enum class Kind { kOpened, kEscalated, kResolved };
  Kind kind = Kind::kOpened;
  std::size_t series = 0;  // engine index
  std::size_t rule = 0;
  std::int64_t period = 0;
  std::optional<double> value;
  double limit = 0.0;  // the rule's limit at the series' age (rule.h, limits by age)
  monitors::Severity severity = monitors::Severity::kWarning;  // the episode's, after the step
  std::string reason;                                          // kResolved: "clear", "restated"
};

// The engine's facts about a series.
struct AlertSeries {
  std::int64_t id = 0;
  std::string key;
  const config::Policy* policy = nullptr;
};

struct AlertCounts {
  long opened = 0, escalated = 0, resolved = 0, grouped = 0, notified = 0;
};

class AlertBook {
 public:
  using SeriesInfo = std::function<AlertSeries(std::size_t index)>;

  // Prepares statements on the store's connection and loads the unresolved alerts;
  // `index_of` maps a series id to the engine's index (-1 when unknown).
  Status Open(Db& db, const std::function<long(std::int64_t)>& index_of);
  void Configure(const config::Settings& settings);  // sinks, storm threshold
  const std::vector<std::string>& sinks() const { return sinks_; }
  // Makes the diagnosis stored with a single (not grouped) alert as it opens: JSON text, or ""
  // for none. Called inside Apply's transaction, with the series' actuals of the batch in it.
  using Diagnoser =
      std::function<std::string(std::size_t index, std::size_t rule, std::int64_t period)>;
  void SetDiagnoser(Diagnoser d) { diagnoser_ = std::move(d); }
  // Sharing series between instances (engine.h, ShareSeries): the id of a new alert of series
  // `index` (0: the store chooses); group ids from `group_base` up; the series whose alerts
  // changed are noted for TakeChanged.
  using IdMaker = std::function<std::int64_t(std::size_t index)>;
  void ShareIds(IdMaker id_maker, std::int64_t group_base) {
    id_maker_ = std::move(id_maker);
    group_base_ = group_base;
    track_changes_ = true;
  }
  // The series (engine indexes, perhaps repeated) whose alerts changed since the last call.
  std::vector<std::size_t> TakeChanged() { return std::exchange(changed_, {}); }
  // After Open and Configure: places the loaded alerts under (index, rule) by rule name through
  // `locate` (nullopt: the rule is gone; the alert is left as stored) and parses snooze periods.
  void Index(const std::function<std::optional<std::pair<std::size_t, std::size_t>>(
                 long index, const std::string& rule)>& locate,
             const std::function<std::int64_t(long index, const std::string& text)>& period_of);

  // Inside the caller's transaction: records one batch's changes (grouping storms).
  Status Apply(const std::vector<AlertChange>& changes, const SeriesInfo& info, std::int64_t now_ms,
               AlertCounts& counts);

  // Lifecycle by hand, inside the caller's transaction: not found (no such alert), conflict
  // (resolved already) or store failed.
  Status Acknowledge(std::int64_t id, const std::string& by, const std::string& note,
                     std::int64_t now_ms);
  Status Snooze(std::int64_t id, std::optional<std::int64_t> until_period,
                const std::string& until_period_text, std::optional<std::int64_t> until_ms,
                const std::string& by, const std::string& note, std::int64_t now_ms);
  Status ResolveByHand(std::int64_t id, const std::string& by, const std::string& note,
                       std::int64_t now_ms);
  // The policy name of alert `id` (resolved or not).
  Result<std::string> PolicyOf(std::int64_t id);
  // Dead deliveries (of `sink`, or every sink when empty) back to pending, due at `now_ms`;
  // the number requeued.
  Result<long> RequeueDead(const std::string& sink, std::int64_t now_ms);
  // Snoozes that ended: by time (now_ms) or because series `index` reached `period`.
  Status WakeSnoozed(std::int64_t now_ms, AlertCounts& counts);
  Status WakeSnoozedAt(std::size_t index, std::int64_t period, const SeriesInfo& info,
                       std::int64_t now_ms, AlertCounts& counts);
  // Every unresolved alert of a series, resolved with `reason` (a reset).
  Status ResolveSeries(std::size_t index, const std::string& reason, const std::string& by,
                       const SeriesInfo& info, std::int64_t now_ms, AlertCounts& counts);

  // Calls `each` for every unresolved alert: (series index, rule index, state name, severity).
  void Tally(const std::function<void(std::size_t, std::size_t, const char*, monitors::Severity)>&
                 each) const;

  std::size_t Mark() const { return undo_.size(); }
  // Whether any unresolved alert is snoozed (kept by Set; cheap).
  bool AnySnoozed() const { return snoozed_ > 0; }
  void RollbackTo(std::size_t mark);
  void Forget() { undo_.clear(); }

 private:
  struct Live {
    std::int64_t id = 0;
    std::int64_t group = 0;  // 0: none
    char state = 'o';        // o(pen), a(cknowledged), s(noozed)
    monitors::Severity severity = monitors::Severity::kWarning;
    std::int64_t snooze_period = INT64_MAX;
    std::int64_t snooze_ms = INT64_MAX;
  };
  static std::uint64_t Key(std::size_t index, std::size_t rule) {
    return (static_cast<std::uint64_t>(index) << 8) | rule;
  }
  void Set(std::uint64_t key, std::optional<Live> value);         // with undo
  void Put(std::uint64_t key, const std::optional<Live>& value);  // without
  void IndexReset();
  Status Done(bool ok) const;
  bool OpenAll(Db& db, const std::function<long(std::int64_t)>& index_of, std::string& error);
  bool ApplyAll(const std::vector<AlertChange>& changes, const SeriesInfo& info,
                std::int64_t now_ms, AlertCounts& counts);
  bool WakeAll(std::int64_t now_ms, AlertCounts& counts);
  bool WakeAt(std::size_t index, std::int64_t period, const SeriesInfo& info, std::int64_t now_ms,
              AlertCounts& counts);
  bool ResolveAll(std::size_t index, const std::string& reason, const std::string& by,
                  const SeriesInfo& info, std::int64_t now_ms, AlertCounts& counts);
  // What an event records besides kind, time, actor and note: the alert's severity and signal
  // value then, and a detail (the previous severity of an escalation, a snooze's end, the
  // reason of a resolution).
  struct EventFacts {
    std::optional<monitors::Severity> severity;
    std::optional<double> value;
    std::string detail;
  };
  bool Event(std::int64_t alert, std::int64_t group, const std::string& kind, std::int64_t now_ms,
             const std::string& actor, const std::string& note, const EventFacts& facts,
             bool notify);
  bool Fail(const std::string& what);
  Status LoadAlert(std::int64_t id, std::uint64_t& key, Live& open);
  bool Transition(std::int64_t id, const std::string& kind, const Live& alert, std::int64_t now_ms,
                  const std::string& actor, const std::string& note, const std::string& detail);

  struct Loaded {
    std::int64_t id;
    long index;
    std::string rule, state, severity;
    std::int64_t group, snooze_ms;
    std::string snooze_period;
  };
  bool GroupMemberLeft(std::int64_t group, std::int64_t now_ms, AlertCounts& counts);
  // Resolves an unresolved alert (row, event, group) by hand or by a reset.
  bool Resolve(std::uint64_t key, const Live& o, const std::string& by, const std::string& reason,
               const std::string& note, std::int64_t now_ms, AlertCounts& counts);
  bool Unsnooze(std::uint64_t key, Live o, std::int64_t now_ms, AlertCounts& counts);

  std::vector<Loaded> loaded_;
  Db* db_ = nullptr;
  std::vector<std::string> sinks_;
  long storm_threshold_ = 25;
  std::unordered_map<std::uint64_t, Live> open_;
  long snoozed_ = 0;  // entries of open_ in state 's'
  std::vector<std::pair<std::uint64_t, std::optional<Live>>> undo_;
  std::string error_;
  Stmt insert_alert_, update_alert_state_, set_severity_, resolve_alert_, insert_event_,
      insert_delivery_, insert_group_, group_left_, select_alert_;
  Diagnoser diagnoser_;
  IdMaker id_maker_;
  std::int64_t group_base_ = 0;
  bool track_changes_ = false;
  std::vector<std::size_t> changed_;
};

}  // namespace forewarden
