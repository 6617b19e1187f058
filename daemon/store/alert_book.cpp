#include "daemon/store/alert_book.h"

#include <algorithm>
#include <map>

#include "daemon/common/iso_time.h"
#include "monitors/period.h"

namespace forewarden {
bool AlertBook::OpenAll(Db& db, const std::function<long(std::int64_t)>& index_of,
                        std::string& error) {
  db_ = &db;
  insert_alert_ = db.Prepare(
      "INSERT INTO alerts(series_id, series_key, policy, rule, signal, severity, state, "
      "opened_period, opened_ms, updated_ms, value, limit_value, group_id, diagnosis, id) "
      "VALUES(?1, ?2, ?3, ?4, ?5, ?6, 'open', ?7, ?8, ?8, ?9, ?10, ?11, ?12, ?13)");
  update_alert_state_ = db.Prepare(
      "UPDATE alerts SET state = ?2, updated_ms = ?3, "
      "ack_by = CASE WHEN ?2 = 'acknowledged' THEN ?4 ELSE ack_by END, "
      "note = COALESCE(?5, note), snooze_until_period = ?6, snooze_until_ms = ?7 WHERE id = ?1");
  set_severity_ = db.Prepare(
      "UPDATE alerts SET severity = ?2, state = 'open', updated_ms = ?3, value = ?4, "
      "snooze_until_period = NULL, snooze_until_ms = NULL WHERE id = ?1");
  resolve_alert_ = db.Prepare(
      "UPDATE alerts SET state = 'resolved', updated_ms = ?2, resolved_ms = ?2, "
      "resolved_period = ?3, resolved_by = ?4, resolved_reason = ?5, note = COALESCE(?6, note), "
      "snooze_until_period = NULL, snooze_until_ms = NULL WHERE id = ?1");
  insert_event_ = db.Prepare(
      "INSERT INTO alert_events(alert_id, group_id, kind, at_ms, actor, note, severity, value, "
      "detail) VALUES(?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9)");
  insert_delivery_ = db.Prepare(
      "INSERT INTO deliveries(event_id, sink, state, next_ms) VALUES(?1, ?2, 'pending', ?3)");
  insert_group_ = db.Prepare(
      "INSERT INTO alert_groups(policy, rule, severity, members, open_members, opened_ms, id) "
      "VALUES(?1, ?2, ?3, ?4, ?4, ?5, ?6)");
  group_left_ = db.Prepare(
      "UPDATE alert_groups SET open_members = open_members - 1, "
      "resolved_ms = CASE WHEN open_members = 1 THEN ?2 ELSE resolved_ms END WHERE id = ?1 "
      "RETURNING open_members, policy, rule, severity, members");
  select_alert_ = db.Prepare(
      "SELECT series_id, rule, state, severity, group_id, policy FROM alerts WHERE id = ?1");
  for (const Stmt* s :
       {&insert_alert_, &update_alert_state_, &set_severity_, &resolve_alert_, &insert_event_,
        &insert_delivery_, &insert_group_, &group_left_, &select_alert_})
    if (!s->valid()) {
      error = db.error();
      return false;
    }
  Stmt load = db.Prepare(
      "SELECT a.id, a.series_id, a.rule, a.state, a.severity, a.group_id, a.snooze_until_ms, "
      "a.policy, a.snooze_until_period FROM alerts a WHERE a.state != 'resolved'");
  if (!load.valid()) {
    error = db.error();
    return false;
  }
  // The rule index comes from the policy the engine knows; the caller resolves it through
  // the rule name after Configure (ReindexRules).
  while (load.Step() && load.Row()) {
    const long index = index_of(load.Int(1));
    if (index < 0) continue;
    loaded_.push_back({load.Int(0), index, std::string(load.Text(2)), std::string(load.Text(3)),
                       std::string(load.Text(4)), load.IsNull(5) ? 0 : load.Int(5),
                       load.IsNull(6) ? INT64_MAX : load.Int(6), std::string(load.Text(8))});
  }
  if (!db.error().empty() && load.Row()) {
    error = db.error();
    return false;
  }
  return true;
}

void AlertBook::Configure(const config::Settings& settings) {
  sinks_.clear();
  for (const auto& s : settings.alerts.sinks) sinks_.push_back(s.name);
  storm_threshold_ = settings.alerts.storm_threshold;
}

void AlertBook::IndexReset() {
  open_.clear();
  snoozed_ = 0;
}

void AlertBook::Index(
    const std::function<std::optional<std::pair<std::size_t, std::size_t>>(
        long index, const std::string& rule)>& locate,
    const std::function<std::int64_t(long index, const std::string& text)>& period_of) {
  IndexReset();
  for (const Loaded& l : loaded_) {
    const auto where = locate(l.index, l.rule);
    if (!where) continue;  // the rule is gone from the policy: the alert stays as it is
    Live o;
    o.id = l.id;
    o.group = l.group;
    o.state = l.state == "acknowledged" ? 'a' : l.state == "snoozed" ? 's' : 'o';
    o.severity = monitors::ParseSeverity(l.severity).value_or(monitors::Severity::kWarning);
    o.snooze_ms = l.snooze_ms;
    o.snooze_period = l.snooze_period.empty() ? INT64_MAX : period_of(l.index, l.snooze_period);
    Put(Key(where->first, where->second), o);
  }
  std::vector<Loaded>().swap(loaded_);  // give the memory back
}

void AlertBook::Put(std::uint64_t key, const std::optional<Live>& value) {
  auto it = open_.find(key);
  if (it != open_.end()) {
    if (it->second.state == 's') --snoozed_;
    if (value)
      it->second = *value;
    else
      open_.erase(it);
  } else if (value) {
    open_.emplace(key, *value);
  }
  if (value && value->state == 's') ++snoozed_;
}

void AlertBook::Set(std::uint64_t key, std::optional<Live> value) {
  if (track_changes_) changed_.push_back(static_cast<std::size_t>(key >> 8));
  auto it = open_.find(key);
  undo_.push_back({key, it == open_.end() ? std::nullopt : std::optional<Live>(it->second)});
  Put(key, value);
}

void AlertBook::RollbackTo(std::size_t mark) {
  while (undo_.size() > mark) {
    auto& [key, previous] = undo_.back();
    Put(key, previous);
    undo_.pop_back();
  }
}

void AlertBook::Tally(const std::function<void(std::size_t, std::size_t, const char*,
                                               monitors::Severity)>& each) const {
  for (const auto& [key, live] : open_)
    each(static_cast<std::size_t>(key >> 8), static_cast<std::size_t>(key & 0xff),
         live.state == 'a'   ? "acknowledged"
         : live.state == 's' ? "snoozed"
                             : "open",
         live.severity);
}

bool AlertBook::Fail(const std::string& what) {
  error_ = what + ": " + db_->error();
  return false;
}

bool AlertBook::Event(std::int64_t alert, std::int64_t group, const std::string& kind,
                      std::int64_t now_ms, const std::string& actor, const std::string& note,
                      const EventFacts& facts, bool notify) {
  insert_event_.Reset();
  if (alert)
    insert_event_.Bind(1, alert);
  else
    insert_event_.BindNull(1);
  if (group)
    insert_event_.Bind(2, group);
  else
    insert_event_.BindNull(2);
  insert_event_.Bind(3, kind).Bind(4, now_ms);
  if (actor.empty())
    insert_event_.BindNull(5);
  else
    insert_event_.Bind(5, actor);
  if (note.empty())
    insert_event_.BindNull(6);
  else
    insert_event_.Bind(6, note);
  if (facts.severity)
    insert_event_.Bind(7, std::string(monitors::SeverityName(*facts.severity)));
  else
    insert_event_.BindNull(7);
  if (facts.value)
    insert_event_.Bind(8, *facts.value);
  else
    insert_event_.BindNull(8);
  if (facts.detail.empty())
    insert_event_.BindNull(9);
  else
    insert_event_.Bind(9, facts.detail);
  if (!insert_event_.Run()) return Fail("alert event");
  if (!notify) return true;
  const std::int64_t event = db_->LastInsertId();
  for (const std::string& sink : sinks_) {
    insert_delivery_.Reset();
    if (!insert_delivery_.Bind(1, event).Bind(2, sink).Bind(3, now_ms).Run())
      return Fail("alert delivery");
  }
  return true;
}

bool AlertBook::ApplyAll(const std::vector<AlertChange>& changes, const SeriesInfo& info,
                         std::int64_t now_ms, AlertCounts& counts) {
  if (changes.empty()) return true;
  // Storms: openings per (policy, rule) in this batch.
  std::map<std::pair<const config::Policy*, std::size_t>, std::vector<std::size_t>> openings;
  if (storm_threshold_ > 0)
    for (std::size_t i = 0; i < changes.size(); ++i)
      if (changes[i].kind == AlertChange::Kind::kOpened &&
          !open_.count(Key(changes[i].series, changes[i].rule)))
        openings[{info(changes[i].series).policy, changes[i].rule}].push_back(i);
  std::vector<std::int64_t> group_of(changes.size(), 0);
  for (auto& [where, members] : openings) {
    if (static_cast<long>(members.size()) <= storm_threshold_) continue;
    const monitors::RuleSpec& rule = where.first->spec.rules[where.second];
    insert_group_.Reset();
    insert_group_.Bind(1, where.first->name)
        .Bind(2, rule.name)
        .Bind(3, std::string(monitors::SeverityName(rule.severity)))
        .Bind(4, static_cast<std::int64_t>(members.size()))
        .Bind(5, now_ms);
    if (group_base_ > 0) {  // sharing series: this instance's own range of group ids
      Stmt top = db_->Prepare("SELECT max(id) FROM alert_groups WHERE id >= ?1");
      if (!top.valid() || !top.Bind(1, group_base_).Step()) return Fail("alert group");
      const std::int64_t next = top.IsNull(0) ? group_base_ : top.Int(0) + 1;
      top.Reset();
      insert_group_.Bind(6, next);
    } else {
      insert_group_.BindNull(6);
    }
    if (!insert_group_.Run()) return Fail("alert group");
    const std::int64_t group = db_->LastInsertId();
    for (std::size_t m : members) group_of[m] = group;
    if (!Event(0, group, "group_opened", now_ms, "", "",
               EventFacts{rule.severity, std::nullopt, ""}, true))
      return false;
    ++counts.grouped;
    ++counts.notified;
  }
  std::string error;
  for (std::size_t i = 0; i < changes.size(); ++i) {
    const AlertChange& c = changes[i];
    const AlertSeries s = info(c.series);
    const monitors::RuleSpec& rule = s.policy->spec.rules[c.rule];
    const std::uint64_t key = Key(c.series, c.rule);
    auto it = open_.find(key);
    const std::string period = monitors::FormatPeriod(s.policy->period, c.period);
    if (c.kind == AlertChange::Kind::kOpened) {
      if (it != open_.end()) continue;  // already recorded (a restart's catch-up, a hand resolve)
      insert_alert_.Reset();
      insert_alert_.Bind(1, s.id)
          .Bind(2, s.key)
          .Bind(3, s.policy->name)
          .Bind(4, rule.name)
          .Bind(5, std::string(monitors::SignalKindName(rule.signal)))
          .Bind(6, std::string(monitors::SeverityName(c.severity)))
          .Bind(7, period)
          .Bind(8, now_ms);
      if (c.value)
        insert_alert_.Bind(9, *c.value);
      else
        insert_alert_.BindNull(9);
      if (rule.signal == monitors::SignalKind::kStale)
        insert_alert_.Bind(10, rule.limit + 0.5);
      else if (rule.signal == monitors::SignalKind::kAlphaAtCap)
        insert_alert_.Bind(10, static_cast<double>(rule.persistence));
      else
        insert_alert_.Bind(10, c.limit);
      if (group_of[i])
        insert_alert_.Bind(11, group_of[i]);
      else
        insert_alert_.BindNull(11);
      // a single alert is diagnosed now; a storm's members are not (their group is the news)
      std::string diagnosis;
      if (!group_of[i] && diagnoser_) diagnosis = diagnoser_(c.series, c.rule, c.period);
      if (!diagnosis.empty())
        insert_alert_.Bind(12, diagnosis);
      else
        insert_alert_.BindNull(12);
      if (const std::int64_t id = id_maker_ ? id_maker_(c.series) : 0; id > 0)
        insert_alert_.Bind(13, id);
      else
        insert_alert_.BindNull(13);
      if (!insert_alert_.Run()) return Fail("alert");
      Live o;
      o.id = db_->LastInsertId();
      o.group = group_of[i];
      o.severity = c.severity;
      Set(key, o);
      if (!Event(o.id, o.group, "opened", now_ms, "", "", EventFacts{c.severity, c.value, ""},
                 o.group == 0))
        return false;
      ++counts.opened;
      if (!o.group) ++counts.notified;
    } else if (c.kind == AlertChange::Kind::kEscalated) {
      if (it == open_.end() || it->second.severity >= c.severity) continue;
      Live o = it->second;
      const monitors::Severity previous = o.severity;
      o.severity = c.severity;
      o.state = 'o';
      o.snooze_ms = o.snooze_period = INT64_MAX;
      set_severity_.Reset();
      set_severity_.Bind(1, o.id)
          .Bind(2, std::string(monitors::SeverityName(c.severity)))
          .Bind(3, now_ms);
      if (c.value)
        set_severity_.Bind(4, *c.value);
      else
        set_severity_.BindNull(4);
      if (!set_severity_.Run()) return Fail("alert escalation");
      Set(key, o);
      // detail: the severity it had (Alertmanager resolves the alert under its old labels)
      if (!Event(o.id, o.group, "escalated", now_ms, "", "",
                 EventFacts{c.severity, c.value, monitors::SeverityName(previous)}, true))
        return false;
      ++counts.escalated;
      ++counts.notified;
    } else {
      if (it == open_.end()) continue;
      const Live o = it->second;
      resolve_alert_.Reset();
      resolve_alert_.Bind(1, o.id)
          .Bind(2, now_ms)
          .Bind(3, period)
          .BindNull(4)
          .Bind(5, c.reason)
          .BindNull(6);
      if (!resolve_alert_.Run()) return Fail("alert resolution");
      Set(key, std::nullopt);
      if (!Event(o.id, o.group, "resolved", now_ms, "", "",
                 EventFacts{o.severity, c.value, c.reason}, o.group == 0))
        return false;
      ++counts.resolved;
      if (!o.group) {
        ++counts.notified;
      } else if (!GroupMemberLeft(o.group, now_ms, counts)) {
        return false;
      }
    }
  }
  return true;
}

bool AlertBook::GroupMemberLeft(std::int64_t group, std::int64_t now_ms, AlertCounts& counts) {
  group_left_.Reset();
  if (!group_left_.Bind(1, group).Bind(2, now_ms).Step() || !group_left_.Row())
    return Fail("alert group member");
  const std::int64_t left = group_left_.Int(0);
  group_left_.Reset();
  if (left > 0) return true;
  if (!Event(0, group, "group_resolved", now_ms, "", "", EventFacts{}, true)) return false;
  ++counts.notified;
  return true;
}

Status AlertBook::LoadAlert(std::int64_t id, std::uint64_t& key, Live& open) {
  for (auto& [k, o] : open_)
    if (o.id == id) {
      key = k;
      open = o;
      return Status::Ok();
    }
  select_alert_.Reset();
  if (!select_alert_.Bind(1, id).Step()) return Status::StoreFailed(db_->error());
  const bool exists = select_alert_.Row();
  select_alert_.Reset();
  if (exists) return Status::Conflict("alert " + std::to_string(id) + " is resolved");
  return Status::NotFound("no alert " + std::to_string(id));
}

bool AlertBook::Transition(std::int64_t id, const std::string& kind, const Live& alert,
                           std::int64_t now_ms, const std::string& actor, const std::string& note,
                           const std::string& detail) {
  return Event(id, 0, kind, now_ms, actor, note, EventFacts{alert.severity, std::nullopt, detail},
               true);
}

Status AlertBook::Acknowledge(std::int64_t id, const std::string& by, const std::string& note,
                              std::int64_t now_ms) {
  std::uint64_t key = 0;
  Live o;
  if (Status loaded = LoadAlert(id, key, o); !loaded) return loaded;
  update_alert_state_.Reset();
  update_alert_state_.Bind(1, id).Bind(2, std::string("acknowledged")).Bind(3, now_ms).Bind(4, by);
  if (note.empty())
    update_alert_state_.BindNull(5);
  else
    update_alert_state_.Bind(5, note);
  update_alert_state_.BindNull(6).BindNull(7);
  if (!update_alert_state_.Run() || !Transition(id, "acknowledged", o, now_ms, by, note, "")) {
    return Status::StoreFailed(error_);
  }
  o.state = 'a';
  o.snooze_ms = o.snooze_period = INT64_MAX;
  Set(key, o);
  return Status::Ok();
}

Status AlertBook::Snooze(std::int64_t id, std::optional<std::int64_t> until_period,
                         const std::string& until_period_text, std::optional<std::int64_t> until_ms,
                         const std::string& by, const std::string& note, std::int64_t now_ms) {
  std::uint64_t key = 0;
  Live o;
  if (Status loaded = LoadAlert(id, key, o); !loaded) return loaded;
  update_alert_state_.Reset();
  update_alert_state_.Bind(1, id).Bind(2, std::string("snoozed")).Bind(3, now_ms).BindNull(4);
  if (note.empty())
    update_alert_state_.BindNull(5);
  else
    update_alert_state_.Bind(5, note);
  if (until_period)
    update_alert_state_.Bind(6, until_period_text);
  else
    update_alert_state_.BindNull(6);
  if (until_ms)
    update_alert_state_.Bind(7, *until_ms);
  else
    update_alert_state_.BindNull(7);
  if (!update_alert_state_.Run() ||
      !Transition(id, "snoozed", o, now_ms, by, note,
                  until_ms ? IsoTime(*until_ms) : until_period_text)) {
    return Status::StoreFailed(error_);
  }
  o.state = 's';
  o.snooze_period = until_period.value_or(INT64_MAX);
  o.snooze_ms = until_ms.value_or(INT64_MAX);
  Set(key, o);
  return Status::Ok();
}

bool AlertBook::Resolve(std::uint64_t key, const Live& o, const std::string& by,
                        const std::string& reason, const std::string& note, std::int64_t now_ms,
                        AlertCounts& counts) {
  resolve_alert_.Reset();
  resolve_alert_.Bind(1, o.id).Bind(2, now_ms).BindNull(3).Bind(4, by).Bind(5, reason);
  if (note.empty())
    resolve_alert_.BindNull(6);
  else
    resolve_alert_.Bind(6, note);
  if (!resolve_alert_.Run()) return Fail("alert resolution");
  if (!Transition(o.id, "resolved", o, now_ms, by, note, reason) ||
      (o.group && !GroupMemberLeft(o.group, now_ms, counts)))
    return false;
  Set(key, std::nullopt);
  ++counts.resolved;
  ++counts.notified;
  return true;
}

Status AlertBook::ResolveByHand(std::int64_t id, const std::string& by, const std::string& note,
                                std::int64_t now_ms) {
  std::uint64_t key = 0;
  Live o;
  if (Status loaded = LoadAlert(id, key, o); !loaded) return loaded;
  AlertCounts ignored;
  if (!Resolve(key, o, by, "by hand", note, now_ms, ignored)) return Status::StoreFailed(error_);
  return Status::Ok();
}

Result<std::string> AlertBook::PolicyOf(std::int64_t id) {
  Stmt q = db_->Prepare("SELECT policy FROM alerts WHERE id = ?1");
  if (!q.valid() || !q.Bind(1, id).Step()) return Status::StoreFailed(db_->error());
  if (!q.Row()) return Status::NotFound("no alert " + std::to_string(id));
  return std::string(q.Text(0));
}

Result<long> AlertBook::RequeueDead(const std::string& sink, std::int64_t now_ms) {
  Stmt q = db_->Prepare(
      "UPDATE deliveries SET state = 'pending', attempts = 0, next_ms = ?1 "
      "WHERE state = 'dead' AND (?2 = '' OR sink = ?2)");
  if (!q.valid() || !q.Bind(1, now_ms).Bind(2, sink).Run())
    return Status::StoreFailed(db_->error());
  return static_cast<long>(db_->Changes());
}

bool AlertBook::Unsnooze(std::uint64_t key, Live o, std::int64_t now_ms, AlertCounts& counts) {
  update_alert_state_.Reset();
  update_alert_state_.Bind(1, o.id)
      .Bind(2, std::string("open"))
      .Bind(3, now_ms)
      .BindNull(4)
      .BindNull(5)
      .BindNull(6)
      .BindNull(7);
  if (!update_alert_state_.Run() || !Transition(o.id, "snooze_ended", o, now_ms, "", "", ""))
    return false;
  o.state = 'o';
  o.snooze_ms = o.snooze_period = INT64_MAX;
  Set(key, o);
  ++counts.notified;
  return true;
}

bool AlertBook::WakeAll(std::int64_t now_ms, AlertCounts& counts) {
  std::vector<std::pair<std::uint64_t, Live>> due;
  for (const auto& [k, o] : open_)
    if (o.state == 's' && o.snooze_ms <= now_ms) due.push_back({k, o});
  for (const auto& [k, o] : due)
    if (!Unsnooze(k, o, now_ms, counts)) return false;
  return true;
}

bool AlertBook::WakeAt(std::size_t index, std::int64_t period, const SeriesInfo& info,
                       std::int64_t now_ms, AlertCounts& counts) {
  if (!AnySnoozed()) return true;  // the common case: no lookups per series
  const AlertSeries s = info(index);
  for (std::size_t r = 0; r < s.policy->spec.rules.size(); ++r) {
    auto it = open_.find(Key(index, r));
    if (it != open_.end() && it->second.state == 's' && it->second.snooze_period <= period)
      if (!Unsnooze(it->first, it->second, now_ms, counts)) return false;
  }
  return true;
}

bool AlertBook::ResolveAll(std::size_t index, const std::string& reason, const std::string& by,
                           const SeriesInfo& info, std::int64_t now_ms, AlertCounts& counts) {
  const AlertSeries s = info(index);
  for (std::size_t r = 0; r < s.policy->spec.rules.size(); ++r) {
    auto it = open_.find(Key(index, r));
    if (it == open_.end()) continue;
    const Live o = it->second;
    if (!Resolve(it->first, o, by, reason, "", now_ms, counts)) return false;
  }
  return true;
}

// The public side answers Status; the SQL helpers above keep their reason in error_.
Status AlertBook::Done(bool ok) const {
  return ok ? Status::Ok() : Status::StoreFailed("store: alerts: " + error_);
}

Status AlertBook::Open(Db& db, const std::function<long(std::int64_t)>& index_of) {
  std::string error;
  if (!OpenAll(db, index_of, error)) return Status::StoreFailed(error);
  return Status::Ok();
}

Status AlertBook::Apply(const std::vector<AlertChange>& changes, const SeriesInfo& info,
                        std::int64_t now_ms, AlertCounts& counts) {
  return Done(ApplyAll(changes, info, now_ms, counts));
}

Status AlertBook::WakeSnoozed(std::int64_t now_ms, AlertCounts& counts) {
  return Done(WakeAll(now_ms, counts));
}

Status AlertBook::WakeSnoozedAt(std::size_t index, std::int64_t period, const SeriesInfo& info,
                                std::int64_t now_ms, AlertCounts& counts) {
  return Done(WakeAt(index, period, info, now_ms, counts));
}

Status AlertBook::ResolveSeries(std::size_t index, const std::string& reason, const std::string& by,
                                const SeriesInfo& info, std::int64_t now_ms, AlertCounts& counts) {
  return Done(ResolveAll(index, reason, by, info, now_ms, counts));
}

}  // namespace forewarden
