#include "daemon/engine/engine.h"

#include <cstdio>

#include <algorithm>
#include <chrono>
#include <cmath>

#include "daemon/store/alert_reads.h"
#include "daemon/store/state_codec.h"
#include "monitors/interval.h"

namespace forewarden {
namespace {

constexpr std::size_t kMaxProblems = 100;
constexpr std::size_t kMaxGroup = 64;  // batches committed together at most

// Whether a stored state can run under a policy (reloads and restarts must not change a
// series' method or season length under it).
bool Compatible(const monitors::SeriesState& s, const config::Policy& p) {
  if (!s.started) return true;
  if (monitors::IsSeasonal(p.spec.method))
    return s.model.season.size() == static_cast<std::size_t>(p.spec.constants.season_length);
  return s.model.season.empty();
}

// The policy's constants apply to its series (after a reload and at start-up), except where a
// series owns them: fitted constants (start rule "fitted") and an adaptive alpha (it moves by
// itself).
void FitConstants(monitors::SeriesState& s, const config::Policy& p) {
  const monitors::PolicySpec& spec = p.spec;
  const bool fitted =
      spec.start.kind == monitors::StartKind::kFitted && !monitors::IsIntermittent(spec.method);
  if (!fitted) s.own.reset();
  if (!fitted && !spec.adaptive.enabled) s.alpha = spec.constants.alpha;
}

// A re-level (README, reset): the level takes the new value; the smoothed and cumulative errors
// start again from zero.
// Rules start again too: a reset ends every episode (its alerts resolve with reason "reset").
void Relevel(monitors::SeriesState& s, double level) {
  s.model.level = level;
  s.stats.smoothed_error = 0.0;
  s.stats.cusum = 0.0;
  for (auto& r : s.rules) r = monitors::RuleState{};
  s.active = 0;
}

// Applies the re-levels recorded right after the actual of `period` (adjustments in period
// order; `next` walks through them).
void ApplyAdjustments(monitors::SeriesState& s, const std::vector<Adjustment>& adjustments,
                      std::size_t& next, std::int64_t period) {
  for (; next < adjustments.size() && adjustments[next].period <= period; ++next)
    if (adjustments[next].period == period) Relevel(s, adjustments[next].level);
}

// The age the series' latest period was judged at (rule.h, limits by age).
int LatestAge(const monitors::PolicySpec& spec, const monitors::SeriesState& s) {
  return std::max(0, monitors::SeriesAge(spec, s) - 1);
}

void FitRules(monitors::SeriesState& s, const config::Policy& p) {
  if (s.rules.size() != p.spec.rules.size()) {
    s.rules.resize(p.spec.rules.size());
    s.active &= p.spec.rules.size() >= 64 ? ~0ULL : ((1ULL << p.spec.rules.size()) - 1);
  }
}

}  // namespace

Engine::Engine(std::shared_ptr<const config::Settings> settings, Clock clock)
    : settings_(std::move(settings)),
      queue_depth_(static_cast<std::size_t>(settings_->server.queue_depth)),
      clock_(std::move(clock)) {}

Engine::~Engine() {
  Stop();
}

Status Engine::Start() {
  const config::Server& srv = settings_->server;
  if (Status opened = store_.Open(srv.data, srv.synchronous == config::Synchronous::kFull,
                                  srv.max_database_bytes, srv.cache_bytes);
      !opened)
    return opened;
  if (Status opened = handover_.Open(store_.db()); !opened) return opened;
  if (Status loaded = LoadAll(); !loaded) return loaded;
  last_flush_ms_ = last_housekeeping_ms_ = clock_();
  thread_ = std::thread([this] { Run(); });
  return Status::Ok();
}

Status Engine::Reseat() {
  alerts_.TakeChanged();                 // engine indexes of the memory being replaced
  keys_ = std::make_shared<KeyArena>();  // read views still using the old keys keep it
  label_sets_.clear();
  label_ids_.clear();
  series_ = ChunkedVector<Series>();
  index_ = SeriesIndex<KeyOf>{KeyOf{&series_}};
  dirty_.clear();
  dirty_count_ = 0;
  touched_.clear();
  alerting_.clear();
  in_alerting_.clear();
  read_rows_.clear();
  read_changed_.clear();
  in_read_changed_.clear();
  read_all_ = true;
  read_identity_.reset();
  read_label_sets_ = 0;
  next_ordinal_.clear();
  positions_.clear();
  return LoadAll();
}

Status Engine::LoadAll() {
  std::string problem;
  std::vector<std::size_t> stale_states;
  Result<std::int64_t> count = store_.CountSeries();
  if (!count) return count.status();
  index_.Reserve(static_cast<std::size_t>(*count) + 1024);
  Status loaded = store_.LoadSeries([&](StoredSeries&& row) {
    const config::Policy* policy = nullptr;
    for (const auto& p : settings_->policies)
      if (p.name == row.policy) policy = &p;
    if (!policy) {
      if (problem.empty())
        problem = "series '" + row.key + "' belongs to policy '" + row.policy +
                  "', which the settings no longer have";
      return;
    }
    if (!Compatible(row.state, *policy)) {
      if (problem.empty())
        problem = "series '" + row.key + "': policy '" + row.policy +
                  "' changed its method or season length; the stored state does not fit it";
      return;
    }
    Series s;
    s.id = row.id;
    s.key = keys_->Add(row.key);
    s.part = row.place.part;
    s.ordinal = row.place.ordinal;
    s.episodes = row.place.episodes;
    s.labels = InternLabels(row.labels);
    s.policy = policy;
    s.state = std::move(row.state);
    FitRules(s.state, *policy);
    FitConstants(s.state, *policy);
    s.retained = static_cast<std::int32_t>(row.retained);
    const bool behind =
        row.retained > 0 && (!s.state.seen || row.newest_period > s.state.last_period);
    series_.push_back(std::move(s));
    if (behind) stale_states.push_back(series_.size() - 1);
    index_.Insert(series_.back().key, series_.size() - 1);
  });
  if (!loaded) return loaded;
  if (!problem.empty()) {
    return Status::Invalid(problem);
  }
  // States are written lazily (README, "Durability"): after a crash some lag their actuals.
  // Replaying the newer actuals with the same step brings them to where they were.
  if (!stale_states.empty()) {
    if (Status begun = store_.Begin(); !begun) return begun;
    for (std::size_t i : stale_states) {
      Series& s = series_[i];
      std::vector<StoredActual> newer;
      const std::int64_t from = s.state.seen ? s.state.last_period + 1 : INT64_MIN;
      if (Status read = store_.Actuals(s.id, from, INT64_MAX, newer); !read) return read;
      monitors::StepResult r;
      for (const StoredActual& a : newer)
        if (monitors::Step(s.policy->spec, s.state, a.period, a.value, r) !=
            monitors::StepStatus::kOk) {
          return Status::Conflict("series '" + std::string(s.key) +
                                  "': its stored actuals cannot be replayed");
        }
      if (Status written = store_.UpdateState(s.id, s.state); !written) return written;
    }
    if (Status committed = store_.Commit(); !committed) return committed;
    recovered_ = static_cast<long>(stale_states.size());
  }
  if (Status opened = OpenAlerts(); !opened) return opened;
  dirty_.assign(series_.size(), 0);
  for (std::size_t i = 0; i < series_.size(); ++i) NoteAlerting(i);
  if (sharing()) {
    std::vector<SourceOffset> offsets;
    if (Status read = store_.Offsets(offsets); !read) return read;
    for (const SourceOffset& o : offsets) positions_[o.partition] = o;
    for (std::size_t i = 0; i < series_.size(); ++i)
      if (series_[i].part >= 0 && !next_ordinal_.count(series_[i].part)) {
        Result<std::int32_t> next = store_.NextOrdinal(series_[i].part);
        if (!next) return next.status();
        next_ordinal_[series_[i].part] = *next;
      }
  }
  return Status::Ok();
}

Status Engine::OpenAlerts() {
  // Series ids increase with the index (loaded in id order, created in order): binary search,
  // no map of a million entries at start-up.
  const auto index_of = [this](std::int64_t id) -> long {
    std::size_t lo = 0, hi = series_.size();
    while (lo < hi) {
      const std::size_t mid = lo + (hi - lo) / 2;
      if (series_[mid].id < id)
        lo = mid + 1;
      else
        hi = mid;
    }
    return lo < series_.size() && series_[lo].id == id ? static_cast<long>(lo) : -1L;
  };
  if (Status opened = alerts_.Open(store_.db(), index_of); !opened)
    return opened.Prefix("store: alerts: ");
  alerts_.Configure(*settings_);
  if (sharing()) {
    Result<std::string> id = store_.InstallId();
    if (!id) return id.status();
    install_id_ = *id;
    alerts_.ShareIds([this](std::size_t index) { return NextAlertId(index); },
                     static_cast<std::int64_t>(1 + std::hash<std::string>{}(install_id_) % 0xFFFFE)
                         << 32);
  }
  // A single alert carries its diagnosis from the moment it opens (notifications read it from
  // the alert row: the delivery worker never asks the engine).
  alerts_.SetDiagnoser([this](std::size_t index, std::size_t rule, std::int64_t period) {
    const Series& s = series_[index];
    if (!monitors::StepSignal(s.policy->spec.rules[rule].signal)) return std::string();
    const Result<monitors::AlertDiagnosis> d = DiagnoseSeries(index, period);
    if (!d || !d->diagnosis.ok) return std::string();
    return DiagnosisObject(*d, s.policy->period).dump();
  });
  alerts_.Index(
      [&](long index,
          const std::string& rule) -> std::optional<std::pair<std::size_t, std::size_t>> {
        const auto& rules = series_[static_cast<std::size_t>(index)].policy->spec.rules;
        for (std::size_t r = 0; r < rules.size(); ++r)
          if (rules[r].name == rule) return std::pair{static_cast<std::size_t>(index), r};
        return std::nullopt;
      },
      [&](long index, const std::string& text) -> std::int64_t {
        const auto parsed =
            monitors::ParsePeriod(series_[static_cast<std::size_t>(index)].policy->period, text);
        return parsed.ok() ? parsed.ordinal : INT64_MAX;
      });
  return Status::Ok();
}

AlertSeries Engine::Info(std::size_t index) const {
  const Series& s = series_[index];
  return AlertSeries{s.id, std::string(s.key), s.policy};
}

void Engine::CollectChanges(std::size_t index, const monitors::StepResult& r, std::int64_t period,
                            std::vector<AlertChange>& out) const {
  const Series& s = series_[index];
  const auto& rules = s.policy->spec.rules;
  monitors::ForEachEpisodeStep(r, rules.size(), [&](const monitors::EpisodeStep& e) {
    const std::size_t i = e.rule;
    AlertChange c;
    c.series = index;
    c.rule = i;
    c.period = period;
    if (monitors::StepSignal(rules[i].signal)) c.value = monitors::RuleValue(rules[i], r, s.state);
    c.limit = monitors::LimitsAt(rules[i], LatestAge(s.policy->spec, s.state)).limit;
    c.severity = monitors::EpisodeSeverity(rules[i], s.state.rules[i]);
    if (e.opened) {
      c.kind = AlertChange::Kind::kOpened;
      if (e.resolved) c.severity = rules[i].severity;  // began and ended inside the step
      out.push_back(c);
    }
    if (e.escalated) {
      c.kind = AlertChange::Kind::kEscalated;
      out.push_back(c);
    }
    if (e.resolved) {
      c.kind = AlertChange::Kind::kResolved;
      c.reason = "clear";
      out.push_back(c);
    }
  });
}

Status Engine::AlertAction(const std::function<Status(AlertBook&, std::int64_t now_ms)>& action) {
  if (std::string sticky = failure(); !sticky.empty()) return Status::StoreFailed(sticky);
  if (seating_) return Status::Busy("partitions are being restored; retry shortly");
  if (Status begun = store_.Begin(); !begun) return Fail(begun);
  const std::size_t mark = alerts_.Mark();
  Status done = action(alerts_, clock_());
  if (!done) {
    store_.Rollback();
    alerts_.RollbackTo(mark);
    if (done.kind() == ErrorKind::kStoreFailed) {
      Fail("store: alerts: " + done.message());
      return Status::StoreFailed(failure());
    }
    return done;
  }
  if (Status committed = store_.Commit(); !committed) {
    store_.Rollback();
    alerts_.RollbackTo(mark);
    return Fail(committed);
  }
  alerts_.Forget();
  if (sharing()) PublishChanges({}, {});
  if (on_outbox_) on_outbox_();
  return Status::Ok();
}

void Engine::Housekeeping() {
  if (seating_) return;  // memory is behind the store (partitions being adopted)
  const std::int64_t now = clock_();
  if (now - last_housekeeping_ms_ < settings_->alerts.check_seconds * 1000) return;
  last_housekeeping_ms_ = now;
  if (!failure().empty()) return;
  // Stale rules: series whose actuals are overdue (policies with stale rules only; their
  // current period is worked out once per policy).
  std::unordered_map<const config::Policy*, monitors::PeriodOrdinal> current;
  const std::int64_t today = Today();
  for (const config::Policy& p : settings_->policies)
    for (const monitors::RuleSpec& r : p.spec.rules)
      if (r.signal == monitors::SignalKind::kStale)
        current[&p] = monitors::PeriodOfDay(p.period, today);
  if (current.empty() && !alerts_.AnySnoozed()) return;  // nothing to check: no transaction
  std::vector<AlertChange> changes;
  struct Saved {
    std::size_t index;
    monitors::RuleStates rules;  // CheckStale changes only the rule states
    std::uint64_t active;
  };
  std::vector<Saved> before;
  for (std::size_t i = 0; !current.empty() && i < series_.size(); ++i) {
    Series& s = series_[i];
    auto it = current.find(s.policy);
    if (it == current.end() || !s.state.seen) continue;
    const std::int64_t overdue = it->second - s.state.last_period - 1;
    if (overdue <= 0) continue;
    monitors::StepResult r;
    Saved saved{i, s.state.rules, s.state.active};
    monitors::CheckStale(s.policy->spec, s.state, static_cast<long>(overdue), r);
    NoteChanged(i);  // its stale rule's run counts moved
    if (r.episodes_opened) {
      NoteAlerting(i);
      before.push_back(std::move(saved));
      CollectChanges(i, r, s.state.last_period + overdue, changes);
      MarkDirty(i);
    }
  }
  const std::size_t mark = alerts_.Mark();
  AlertCounts counts;
  Status ok = store_.Begin();
  if (ok)
    ok = alerts_.Apply(
        changes, [this](std::size_t i) { return Info(i); }, now, counts);
  if (ok) ok = alerts_.WakeSnoozed(now, counts);
  if (ok) ok = store_.Commit();
  if (!ok) {
    Fail(ok.message());
    store_.Rollback();
    alerts_.RollbackTo(mark);
    for (Saved& b : before) {
      series_[b.index].state.rules = std::move(b.rules);
      series_[b.index].state.active = b.active;
      NoteChanged(b.index);
    }
    return;
  }
  alerts_.Forget();
  Committed(counts);
  if (sharing()) PublishChanges({}, {});
}

void Engine::Stop() {
  {
    std::lock_guard lock(mu_);
    stopping_ = true;
  }
  wake_.notify_all();
  if (thread_.joinable()) {
    thread_.join();
    // A failure here loses nothing: the actuals are committed and the next start replays them.
    if (dirty_count_ && failure().empty() && FlushAll()) ClearDirty();
  }
}

std::uint32_t Engine::InternLabels(const std::string& json) {
  auto it = label_ids_.find(json);
  if (it != label_ids_.end()) return it->second;
  label_sets_.push_back(json);
  const auto id = static_cast<std::uint32_t>(label_sets_.size() - 1);
  label_ids_.emplace(json, id);
  return id;
}

void Engine::MarkDirty(std::size_t index) {
  if (dirty_.size() < series_.size()) dirty_.resize(series_.size(), 0);
  if (!dirty_[index]) {
    dirty_[index] = 1;
    ++dirty_count_;
  }
}

Status Engine::FlushDirty() {
  // A flag scan (a byte a series) rather than a list: no memory per dirty series.
  const std::size_t n = std::min(dirty_.size(), series_.size());  // rolled-back series are gone
  for (std::size_t i = 0; i < n; ++i) {
    if (!dirty_[i]) continue;
    if (Status written = store_.UpdateState(series_[i].id, series_[i].state); !written)
      return written;
  }
  return Status::Ok();
}

Status Engine::FlushAll() {
  Status done = store_.Begin();
  if (done) done = FlushDirty();
  if (done) done = store_.Commit();
  if (!done) store_.Rollback();
  return done;
}

void Engine::ClearDirty() {
  std::fill(dirty_.begin(), dirty_.end(), 0);
  dirty_count_ = 0;
  last_flush_ms_ = clock_();
}

bool Engine::Submit(std::vector<IngestRow> rows, std::function<void(IngestReply)> done) {
  return Submit(std::move(rows), {}, std::move(done));
}

bool Engine::Submit(std::vector<IngestRow> rows, std::vector<SourceOffset> offsets,
                    std::function<void(IngestReply)> done) {
  {
    std::lock_guard lock(mu_);
    if (stopping_ || queue_.size() >= queue_depth_) return false;
    Job job;
    job.rows = std::move(rows);
    job.offsets = std::move(offsets);
    job.done = std::move(done);
    queue_.push_back(std::move(job));
  }
  wake_.notify_one();
  return true;
}

bool Engine::Post(std::function<void()> read) {
  {
    std::lock_guard lock(mu_);
    if (stopping_ || queue_.size() >= queue_depth_) return false;
    Job job;
    job.read = std::move(read);
    queue_.push_back(std::move(job));
  }
  wake_.notify_one();
  return true;
}

bool Engine::Reload(std::shared_ptr<const config::Settings> settings) {
  return Post([this, settings = std::move(settings)] {
    // Series move to the policy of the same name; the checks in serve's reload path make sure
    // that such a policy exists and keeps its method and season length.
    for (std::size_t i = 0; i < series_.size(); ++i) {
      Series& s = series_[i];
      for (const auto& p : settings->policies)
        if (p.name == s.policy->name) {
          s.policy = &p;
          FitRules(s.state, p);
          FitConstants(s.state, p);
        }
    }
    settings_ = settings;
    read_all_ = true;
    // rule indexes may have moved: place the alerts again
    if (Status opened = OpenAlerts(); !opened) Fail(opened.message());
  });
}

std::string Engine::failure() const {
  std::lock_guard lock(mu_);
  return failure_;
}

std::size_t Engine::queue_depth() const {
  std::lock_guard lock(mu_);
  return queue_.size();
}

void Engine::Fail(const std::string& why) {
  std::lock_guard lock(mu_);
  if (failure_.empty()) failure_ = why;
}

Status Engine::Fail(const Status& store_failure) {
  Fail(store_failure.message());
  return Status::StoreFailed(failure());
}

void Engine::Run() {
  for (;;) {
    std::vector<Job> group;
    {
      std::unique_lock lock(mu_);
      const auto flush_every =
          std::chrono::seconds(std::max<long>(1, settings_->server.state_flush_seconds));
      if (!wake_.wait_for(lock, flush_every, [this] { return stopping_ || !queue_.empty(); })) {
        lock.unlock();
        Housekeeping();
        // idle: write the states that are waiting
        if (dirty_count_ && failure().empty()) {
          if (Status flushed = FlushAll(); flushed)
            ClearDirty();
          else
            Fail(flushed.message());
        }
        continue;
      }
      if (queue_.empty()) return;  // stopping and drained
      // A run of batches commits together; a read job or a reload ends the run.
      while (!queue_.empty() && group.size() < kMaxGroup) {
        const bool is_batch = static_cast<bool>(queue_.front().done);
        if (!is_batch && !group.empty()) break;
        group.push_back(std::move(queue_.front()));
        queue_.pop_front();
        if (!is_batch) break;
      }
    }
    if (!group.front().done) {
      if (group.front().read) group.front().read();
      continue;
    }
    const std::size_t group_mark = alerts_.Mark();
    std::vector<Pending> pending(group.size());
    for (std::size_t i = 0; i < group.size(); ++i) pending[i].job = std::move(group[i]);
    const std::string sticky =
        seating_ ? std::string("partitions are being restored; retry shortly") : failure();
    if (!sticky.empty()) {
      for (Pending& p : pending) {
        ++counters_.batches_unavailable;
        p.reply.status = IngestReply::Status::kUnavailable;
        p.reply.error = sticky;
        p.job.done(std::move(p.reply));
      }
      continue;
    }
    if (Status begun = store_.Begin(); !begun) {
      Fail(begun.message());
    } else {
      for (Pending& p : pending) ApplyBatch(p);
      const config::Server& srv = settings_->server;
      const bool flush =
          failure().empty() && (static_cast<long>(dirty_count_) >= srv.state_flush_series ||
                                clock_() - last_flush_ms_ >= srv.state_flush_seconds * 1000);
      if (flush) {
        if (Status flushed = FlushDirty(); !flushed) Fail(flushed.message());
      }
      const auto commit_start = std::chrono::steady_clock::now();
      if (failure().empty()) {
        if (Status committed = store_.Commit(); !committed) Fail(committed.message());
      }
      if (on_commit_ && failure().empty())
        on_commit_(
            std::chrono::duration<double>(std::chrono::steady_clock::now() - commit_start).count());
      if (flush && failure().empty()) ClearDirty();
    }
    const std::string failed = failure();
    if (!failed.empty()) {
      store_.Rollback();
      alerts_.RollbackTo(group_mark);
      // Undo in reverse order: later batches saw the earlier ones' states.
      for (auto it = pending.rbegin(); it != pending.rend(); ++it) {
        if (it->reply.status == IngestReply::Status::kOk) Rewind(*it);
        it->reply.status = IngestReply::Status::kUnavailable;
        it->reply.error = failed;
        ++counters_.batches_unavailable;
      }
    } else {
      alerts_.Forget();
      AlertCounts committed;
      const std::int64_t now = clock_();
      for (const Pending& p : pending) {
        if (p.reply.status == IngestReply::Status::kOk) {
          for (const config::Policy* policy : p.policies) last_arrival_[policy->name] = now;
          for (const auto& [policy, sum] : p.bias)
            bias_[policy].Add(sum.period, sum.errors, sum.actuals);
          committed.opened += p.alert_counts.opened;
          committed.escalated += p.alert_counts.escalated;
          committed.resolved += p.alert_counts.resolved;
          committed.grouped += p.alert_counts.grouped;
          committed.notified += p.alert_counts.notified;
          counters_.applied += p.reply.counts.applied;
          counters_.unchanged += p.reply.counts.unchanged;
          counters_.restated += p.reply.counts.restated;
          ++counters_.batches_ok;
        } else {
          counters_.rejected_rows += p.reply.counts.rows;
          ++counters_.batches_rejected;
        }
      }
      Committed(committed);
      if (sharing()) {
        std::vector<std::size_t> changed;
        std::vector<std::int32_t> moved;
        for (const Pending& p : pending) {
          if (p.reply.status != IngestReply::Status::kOk) continue;
          changed.insert(changed.end(), p.touched.begin(), p.touched.end());
          for (const SourceOffset& o : p.job.offsets) {
            positions_[o.partition] = o;
            moved.push_back(o.partition);
          }
        }
        PublishChanges(std::move(changed), moved);
      }
    }
    for (Pending& p : pending) p.job.done(std::move(p.reply));
    Housekeeping();
  }
}

void Engine::Rewind(Pending& p) {
  for (auto it = p.undo.rbegin(); it != p.undo.rend(); ++it) {
    if (it->index >= p.series_before) continue;
    Series& s = series_[it->index];
    s.state = std::move(it->state);
    s.retained = it->retained;
    s.episodes = it->episodes;
    NoteChanged(it->index);
  }
  while (series_.size() > p.series_before) {
    if (series_.back().part >= 0) next_ordinal_[series_.back().part] = series_.back().ordinal;
    index_.Erase(series_.back().key);
    series_.pop_back();
  }
  p.undo.clear();
}

void Engine::ApplyBatch(Pending& p) {
  p.series_before = series_.size();
  p.alert_mark = alerts_.Mark();
  p.reply.counts.rows = static_cast<long>(p.job.rows.size());
  if (Status saved = store_.Savepoint(); !saved) {
    Fail(saved.message());
    return;
  }
  // Per-series "touched in this batch" flags live across batches (no allocation per batch);
  // they are cleared through the list when the batch is done.
  std::vector<char>& touched = touched_;
  if (touched.size() < series_.size()) touched.resize(series_.size(), 0);
  std::vector<std::size_t> touched_list;
  struct ClearTouched {
    std::vector<char>& flags;
    std::vector<std::size_t>& list;
    ~ClearTouched() {
      for (std::size_t i : list)
        if (i < flags.size()) flags[i] = 0;
    }
  } clear_touched{touched, touched_list};
  std::unordered_map<std::string, bool> bad_series;
  bool store_failed = false;
  for (const IngestRow& row : p.job.rows) {
    if (bad_series.count(row.series)) continue;  // one problem per series is enough
    if (!ApplyRow(row, p, touched, touched_list, store_failed)) bad_series[row.series] = true;
    if (store_failed) break;
  }
  if (store_failed) return;  // Run() rolls everything back
  if (p.reply.problem_count == 0) {
    for (std::size_t i : touched_list) {
      // Every series that holds a rule now is in the alerting index (a rejected batch restores
      // states that were already there; a later rollback leaves a superset, which reads filter).
      NoteAlerting(i);
      NoteChanged(i);
      Series& s = series_[i];
      bool trimmed = false;
      if (Status done = Trim(s, trimmed); !done) {
        Fail(done.message());
        return;
      }
      // A restated or trimmed series is written now: replaying newer actuals at start could
      // not reproduce it. Others wait for the next flush.
      if (trimmed || p.must_write.count(i)) {
        if (Status written = store_.UpdateState(s.id, s.state); !written) {
          Fail(written.message());
          return;
        }
      } else {
        MarkDirty(i);
      }
    }
    // Alert changes go into the same transaction as the actuals that caused them.
    const auto info = [this](std::size_t i) { return Info(i); };
    const std::int64_t now = clock_();
    AlertCounts counts;
    Status ok = alerts_.Apply(p.alert_changes, info, now, counts);
    for (std::size_t k = 0; ok && k < touched_list.size(); ++k) {
      const std::size_t i = touched_list[k];
      ok = alerts_.WakeSnoozedAt(i, series_[i].state.last_period, info, now, counts);
    }
    if (!ok) {
      Fail(ok.message());
      return;
    }
    if (sharing()) p.touched = touched_list;
    p.reply.counts.alerts_opened = counts.opened;
    p.reply.counts.alerts_resolved = counts.resolved;
    p.alert_counts = counts;  // counted once the group commits
    // a source's offsets commit with the actuals they carried, or not at all
    if (Status put = store_.PutOffsets(p.job.offsets); !put) {
      Fail(put.message());
      return;
    }
    if (Status released = store_.ReleaseSavepoint(); !released) Fail(released.message());
    return;
  }
  p.reply.status = IngestReply::Status::kRejected;
  p.reply.counts = IngestCounts{};
  p.reply.counts.rows = static_cast<long>(p.job.rows.size());
  if (Status back = store_.RollbackToSavepoint(); !back) Fail(back.message());
  alerts_.RollbackTo(p.alert_mark);
  p.alert_changes.clear();
  p.bias.clear();
  Rewind(p);
}

bool Engine::ApplyRow(const IngestRow& row, Pending& p, std::vector<char>& touched,
                      std::vector<std::size_t>& touched_list, bool& store_failed) {
  auto problem = [&](const char* field, std::string message) {
    ++p.reply.problem_count;
    if (p.reply.problems.size() < kMaxProblems)
      p.reply.problems.push_back({row.line, field, std::move(message)});
    return false;
  };
  auto store_error = [&](const Status& failed) {
    Fail(failed.message());
    store_failed = true;
    return false;
  };
  if (row.series.empty()) return problem("series", "the series key is empty");
  std::size_t index;
  const long found_at = index_.Find(row.series);
  if (found_at < 0) {
    const config::Policy* policy = config::FindPolicy(*settings_, row.series, row.labels);
    if (!policy) return problem("series", "no policy matches the series '" + row.series + "'");
    if (static_cast<long>(series_.size()) >= settings_->server.max_series) {
      counters_.series_refused.fetch_add(1);
      return problem("series", "a new series, but the service holds server.max_series (" +
                                   std::to_string(settings_->server.max_series) +
                                   ") series already");
    }
    Series s;
    if (sharing()) {
      if (row.partition < 0 || row.partition > kMaxSharedPartition)
        return problem("series",
                       "this instance shares series through Kafka: actuals come from "
                       "its source topic (partitions 0-" +
                           std::to_string(kMaxSharedPartition) + ")");
      const std::int32_t ordinal = next_ordinal_[row.partition];
      if (ordinal >= kMaxSharedOrdinal)
        return problem("series", "partition " + std::to_string(row.partition) + " holds " +
                                     std::to_string(kMaxSharedOrdinal) +
                                     " series already; use more partitions");
      s.part = row.partition;
      s.ordinal = ordinal;
      next_ordinal_[row.partition] = ordinal + 1;
    }
    s.key = keys_->Add(row.series);
    const std::string labels = LabelsJson(row.labels);
    s.labels = InternLabels(labels);
    s.policy = policy;
    s.state = monitors::NewSeriesState(policy->spec);
    Result<std::int64_t> id = store_.InsertSeries(std::string(s.key), policy->name, labels, s.state,
                                                  SeriesPlace{s.part, s.ordinal, 0});
    if (!id) return store_error(id.status());
    s.id = *id;
    index = series_.size();
    series_.push_back(std::move(s));
    index_.Insert(series_.back().key, index);
    if (touched.size() <= index) touched.resize(index + 1, 0);
    touched[index] = 1;
    touched_list.push_back(index);
    ++p.reply.counts.new_series;
  } else {
    index = static_cast<std::size_t>(found_at);
    if (sharing() && row.partition != series_[index].part)
      return problem("series", "series '" + row.series + "' is held for partition " +
                                   std::to_string(series_[index].part) + " but arrived on " +
                                   std::to_string(row.partition) +
                                   "; producers must key messages by series key");
    if (index < touched.size() && !touched[index]) {
      const Series& s = series_[index];
      p.undo.push_back({index, s.state, s.retained, s.episodes});
      touched[index] = 1;
      touched_list.push_back(index);
    }
  }
  Series& s = series_[index];
  const config::Policy& policy = *s.policy;
  const monitors::PeriodParse period = monitors::ParsePeriod(policy.period, row.period);
  if (!period.ok()) return problem("period", period.error);
  if (const char* why = monitors::ActualProblem(policy.spec, row.value))
    return problem("value", why);
  // an actual for the policy arrived (new, duplicate or restated): the feed is alive
  if (std::find(p.policies.begin(), p.policies.end(), &policy) == p.policies.end())
    p.policies.push_back(&policy);

  if (!s.state.seen || period.ordinal > s.state.last_period) {
    monitors::StepResult r;
    std::string why;
    const monitors::StepStatus st =
        monitors::Step(policy.spec, s.state, period.ordinal, row.value, r, &why);
    if (st != monitors::StepStatus::kOk)
      return problem(st == monitors::StepStatus::kBadValue ? "value" : "period", why);
    if (Status put = store_.PutActual(s.id, period.ordinal, row.value); !put)
      return store_error(put);
    ++s.retained;
    ++p.reply.counts.applied;
    p.reply.counts.filled += r.filled;
    CollectChanges(index, r, period.ordinal, p.alert_changes);
    if (r.has_forecast) {
      auto it = std::find_if(p.bias.begin(), p.bias.end(),
                             [&](const auto& b) { return b.first == &policy; });
      if (it == p.bias.end()) it = p.bias.insert(p.bias.end(), {&policy, BiasSum{}});
      it->second.Add(period.ordinal, r.error, row.value);
    }
    return true;
  }
  Result<std::optional<double>> stored = store_.GetActual(s.id, period.ordinal);
  if (!stored) return store_error(stored.status());
  const bool found = stored->has_value();
  if (found && **stored == row.value) {
    ++p.reply.counts.unchanged;
    return true;
  }
  // The oldest retained period is read only here (restatements are rare): not kept in memory.
  Result<std::optional<std::int64_t>> oldest_or = store_.OldestActual(s.id);
  if (!oldest_or) return store_error(oldest_or.status());
  const bool any = oldest_or->has_value();
  const std::int64_t oldest = oldest_or->value_or(0);
  if (!any || period.ordinal < oldest)
    return problem("period",
                   "period " + monitors::FormatPeriod(policy.period, period.ordinal) +
                       " is older than the retained history of '" + std::string(s.key) +
                       "' (oldest kept: " +
                       (any ? monitors::FormatPeriod(policy.period, oldest) : std::string("none")) +
                       "); raise the policy's history to restate it");
  if (Status put = store_.PutActual(s.id, period.ordinal, row.value); !put) return store_error(put);
  if (!found) ++s.retained;
  monitors::SeriesState recomputed;
  if (!Recompute(s, nullptr, recomputed)) {
    if (!failure().empty()) {
      store_failed = true;
      return false;
    }
    return problem("value", "the restated history cannot be recomputed");
  }
  // Episodes the restated history no longer has (or now has) resolve (open) as of the newest
  // period.
  monitors::StepResult diff;
  for (std::size_t i = 0; i < recomputed.rules.size() && i < s.state.rules.size(); ++i) {
    const std::uint64_t bit = std::uint64_t{1} << i;
    const monitors::RuleState& was = s.state.rules[i];
    const monitors::RuleState& now = recomputed.rules[i];
    if (was.open && !now.open) diff.episodes_resolved |= bit;
    if (!was.open && now.open) diff.episodes_opened |= bit;
    if (was.open && now.open && now.escalated && !was.escalated) diff.episodes_escalated |= bit;
  }
  s.state = std::move(recomputed);
  p.must_write.insert(index);
  const std::size_t first_change = p.alert_changes.size();
  CollectChanges(index, diff, s.state.last_period, p.alert_changes);
  for (std::size_t k = first_change; k < p.alert_changes.size(); ++k)
    if (p.alert_changes[k].kind == AlertChange::Kind::kResolved)
      p.alert_changes[k].reason = "restated";
  ++p.reply.counts.restated;
  return true;
}

bool Engine::ReplayCheckpoint(const Series& s, std::size_t leave_last,
                              std::vector<StoredActual>& actuals, monitors::SeriesState& state,
                              std::vector<HistoryRow>* rows) {
  std::vector<Adjustment> adjustments;
  Status read = store_.LoadCheckpoint(s.id, state);
  if (read) read = store_.Actuals(s.id, INT64_MIN, INT64_MAX, actuals);
  if (read) read = store_.Adjustments(s.id, adjustments);
  if (!read) {
    Fail(read.message());
    return false;
  }
  FitRules(state, *s.policy);
  FitConstants(state, *s.policy);
  const std::size_t count = actuals.size() > leave_last ? actuals.size() - leave_last : 0;
  std::size_t next_adj = 0;
  for (std::size_t i = 0; i < count; ++i) {
    const StoredActual& a = actuals[i];
    monitors::StepResult r;
    if (rows && state.seen) {
      // report the gap periods this step will fill, as the chart shows them
      for (std::int64_t g = state.last_period + 1; g < a.period; ++g)
        rows->push_back({g, 0.0, false, {}});
    }
    if (monitors::Step(s.policy->spec, state, a.period, a.value, r) != monitors::StepStatus::kOk)
      return false;
    if (rows) rows->push_back({a.period, a.value, true, r});
    ApplyAdjustments(state, adjustments, next_adj, a.period);
  }
  return true;
}

bool Engine::Recompute(Series& s, std::vector<HistoryRow>* rows, monitors::SeriesState& out) {
  std::vector<StoredActual> actuals;
  monitors::SeriesState state;
  if (!ReplayCheckpoint(s, 0, actuals, state, rows)) return false;
  out = std::move(state);
  return true;
}

Status Engine::Trim(Series& s, bool& trimmed) {
  trimmed = false;
  const std::int64_t keep = s.policy->history;
  const std::int64_t slack = std::max<std::int64_t>(8, keep / 4);
  if (s.retained <= keep + slack) return Status::Ok();
  trimmed = true;
  // The checkpoint moves past all but the newest `keep` actuals, which are then dropped.
  std::vector<StoredActual> actuals;
  monitors::SeriesState checkpoint;
  if (!ReplayCheckpoint(s, static_cast<std::size_t>(keep), actuals, checkpoint, nullptr))
    return Status::StoreFailed(failure().empty()
                                   ? "series '" + std::string(s.key) +
                                         "': its retained actuals cannot be replayed into the "
                                         "checkpoint"
                                   : failure());
  const std::size_t first_kept = actuals.size() - static_cast<std::size_t>(keep);
  Status done = store_.UpdateCheckpoint(s.id, checkpoint);
  if (done) done = store_.DropBefore(s.id, actuals[first_kept].period);
  if (!done) return done;
  s.retained = static_cast<std::int32_t>(keep);
  return Status::Ok();
}

std::int64_t Engine::Today() const {
  const std::int64_t ms = clock_();
  return ms >= 0 ? ms / 86400000 : -((-ms + 86399999) / 86400000);
}

bool Engine::IsStale(const Series& s, std::int64_t today) const {
  if (!s.state.seen) return false;
  // Periods that have ended since the last actual without one of their own.
  const monitors::PeriodOrdinal now = monitors::PeriodOfDay(s.policy->period, today);
  return now - s.state.last_period - 1 >= s.policy->stale_after;
}

SeriesView Engine::View(std::size_t index, std::int64_t today) const {
  const Series& s = series_[index];
  return SeriesView{
      s.key, s.policy->name, label_sets_[s.labels], &s.state, s.policy, IsStale(s, today), index};
}

void Engine::ForEachSeries(const std::function<void(const SeriesView&)>& each) const {
  const std::int64_t today = Today();
  for (std::size_t i = 0; i < series_.size(); ++i) each(View(i, today));
}

void Engine::NoteAlerting(std::size_t index) {
  if (index >= series_.size() || !series_[index].state.active) return;
  if (in_alerting_.size() <= index) in_alerting_.resize(std::max(series_.size(), index + 1), 0);
  if (in_alerting_[index]) return;
  in_alerting_[index] = 1;
  alerting_.push_back(static_cast<std::uint32_t>(index));
}

void Engine::ForEachAlertingSeries(const std::function<void(const SeriesView&)>& each) const {
  const std::int64_t today = Today();
  // The index is a superset: entries that no longer hold a rule (or no longer exist) drop out.
  std::size_t kept = 0;
  for (std::uint32_t i : alerting_) {
    if (i >= series_.size() || !series_[i].state.active) {
      if (i < in_alerting_.size()) in_alerting_[i] = 0;
      continue;
    }
    alerting_[kept++] = i;
  }
  alerting_.resize(kept);
  for (std::uint32_t i : alerting_) each(View(i, today));
}

std::optional<SeriesView> Engine::SeriesAt(std::size_t index) const {
  if (index >= series_.size()) return std::nullopt;
  return View(index, Today());
}

void Engine::NoteChanged(std::size_t index) {
  if (read_all_) return;
  if (in_read_changed_.size() <= index) in_read_changed_.resize(index + 1, 0);
  if (in_read_changed_[index]) return;
  in_read_changed_[index] = 1;
  read_changed_.push_back(static_cast<std::uint32_t>(index));
}

ReadRow Engine::ReadRowOf(std::size_t index) const {
  const Series& s = series_[index];
  const monitors::SeriesState& st = s.state;
  const config::Policy& p = *s.policy;
  ReadRow r;
  r.policy = static_cast<std::uint16_t>(s.policy - settings_->policies.data());
  if (st.active) r.flags |= ReadRow::kActive;
  if (st.seen) {
    r.flags |= ReadRow::kSeen;
    r.last_period = static_cast<std::int32_t>(st.last_period);
  }
  if (Warming(st, p)) {
    r.flags |= ReadRow::kWarming;
    return r;
  }
  const auto trigg = monitors::TriggSignal(st.stats), cusum = monitors::CusumSignal(st.stats);
  if (trigg) r.trigg = static_cast<float>(*trigg);
  if (cusum) r.cusum = static_cast<float>(*cusum);
  double best = 0;
  for (std::size_t i = 0; i < p.spec.rules.size() && i < st.rules.size(); ++i) {
    const monitors::RuleSpec& rule = p.spec.rules[i];
    double c = 0;
    const double limit = monitors::LimitsAt(rule, LatestAge(p.spec, st)).limit;
    if (rule.signal == monitors::SignalKind::kTrigg && trigg && limit > 0)
      c = monitors::Excursion(rule.direction, *trigg) / limit;
    else if (rule.signal == monitors::SignalKind::kCusum && rule.periods == 0 && cusum && limit > 0)
      c = monitors::Excursion(rule.direction, *cusum) / limit;
    if ((st.rules[i].active || st.rules[i].run > 0) && c < 1) c = 1;
    if (c > best) {
      best = c;
      r.nearest = static_cast<std::int8_t>(i);
    }
  }
  r.closeness = static_cast<float>(best);
  return r;
}

std::shared_ptr<const ReadView> Engine::ReadSnapshot() {
  const std::int64_t today = Today();
  const std::size_t n = series_.size();
  bool changed = read_all_ || !read_changed_.empty() || read_rows_.size() != n;
  if (read_all_) {
    read_rows_.resize(n);
    for (std::size_t i = 0; i < n; ++i) read_rows_[i] = ReadRowOf(i);
  } else {
    const std::size_t before = std::min(read_rows_.size(), n);
    read_rows_.resize(n);
    for (std::size_t i = before; i < n; ++i) read_rows_[i] = ReadRowOf(i);  // new series
    for (std::uint32_t i : read_changed_)
      if (i < n) read_rows_[i] = ReadRowOf(i);
  }
  for (std::uint32_t i : read_changed_)
    if (i < in_read_changed_.size()) in_read_changed_[i] = 0;
  read_changed_.clear();
  read_all_ = false;
  // Keys and label sets: a new table only when series or label sets were added.
  if (!read_identity_ || read_identity_->keys.size() != n ||
      read_label_sets_ != label_sets_.size()) {
    auto identity = std::make_shared<ReadIdentity>();
    identity->keys.reserve(n);
    identity->labels.reserve(n);
    for (std::size_t i = 0; i < n; ++i) {
      identity->keys.push_back(series_[i].key);
      identity->labels.push_back(series_[i].labels);
    }
    identity->label_sets = label_sets_;
    identity->arena = keys_;
    read_label_sets_ = label_sets_.size();
    read_identity_ = std::move(identity);
    changed = true;
  }
  if (changed || !read_view_ || read_view_->today != today || read_view_->settings != settings_) {
    auto view = std::make_shared<ReadView>();
    view->version = ++read_version_;
    view->today = today;
    view->settings = settings_;
    view->rows = read_rows_;
    view->identity = read_identity_;
    read_view_ = std::move(view);
  }
  return read_view_;
}

std::optional<SeriesView> Engine::FindSeries(const std::string& key) const {
  const long pos = index_.Find(key);
  if (pos < 0) return std::nullopt;
  return View(static_cast<std::size_t>(pos), Today());
}

bool Engine::History(const std::string& key, std::int64_t from, std::int64_t to,
                     std::vector<HistoryRow>& rows, std::string& error) {
  const long pos = index_.Find(key);
  if (pos < 0) {
    error = "no series '" + key + "'";
    return false;
  }
  std::vector<HistoryRow> all;
  monitors::SeriesState ignored;
  if (!Recompute(series_[static_cast<std::size_t>(pos)], &all, ignored)) {
    error = failure().empty() ? "the history cannot be recomputed" : failure();
    return false;
  }
  rows.clear();
  for (HistoryRow& r : all)
    if (r.period >= from && r.period <= to) rows.push_back(r);
  return true;
}

Result<monitors::AlertDiagnosis> Engine::DiagnoseAlert(const std::string& key,
                                                       std::int64_t opened) {
  const long pos = index_.Find(key);
  if (pos < 0) return Status::NotFound("no series '" + key + "'");
  return DiagnoseSeries(static_cast<std::size_t>(pos), opened);
}

Result<monitors::AlertDiagnosis> Engine::DiagnoseSeries(std::size_t index, std::int64_t opened) {
  std::vector<HistoryRow> rows;
  monitors::SeriesState ignored;
  if (!Recompute(series_[index], &rows, ignored))
    return Status::StoreFailed(failure().empty() ? "the history cannot be recomputed" : failure());
  const monitors::PolicySpec& spec = series_[index].policy->spec;
  std::vector<monitors::PeriodOrdinal> period;
  std::vector<double> actual, forecast, mad;
  double previous_mad = spec.initial_mad;
  const double per_mad = monitors::IntervalHalfWidth(spec.coverage, 1.0);
  for (const HistoryRow& h : rows) {
    const monitors::StepResult& r = h.result;
    // The MAD before this period: exact from its interval when there is one (the interval is
    // z x 1.2533 x that MAD), else the previous period's.
    const double mad_before =
        r.has_forecast && r.lower ? (r.forecast - *r.lower) / per_mad : previous_mad;
    previous_mad = r.stats.mad;
    if (!h.observed) continue;
    period.push_back(h.period);
    actual.push_back(h.actual);
    forecast.push_back(r.has_forecast ? r.forecast : std::nan(""));
    mad.push_back(mad_before);
  }
  return monitors::DiagnoseAlert(period, actual, forecast, mad, opened,
                                 monitors::IsIntermittent(spec.method), spec.coverage);
}

Result<double> Engine::Reset(const std::string& key, const std::string& how, double value, int k,
                             const std::string& who, const std::string& note) {
  if (seating_) return Status::Busy("partitions are being restored; retry shortly");
  const long pos = index_.Find(key);
  if (pos < 0) return Status::NotFound("no series '" + key + "'");
  double new_level = 0;
  Series& s = series_[static_cast<std::size_t>(pos)];
  if (!s.state.started || !s.state.seen) {
    return Status::Conflict("the series has no forecast yet; nothing to re-level");
  }
  if (monitors::IsIntermittent(s.policy->spec.method)) {
    return Status::Conflict("croston and sba series cannot be re-leveled");
  }
  if (!failure().empty()) return Status::StoreFailed(failure());
  if (how == "value") {
    new_level = value;
  } else {
    std::vector<StoredActual> actuals;
    if (Status read = store_.Actuals(s.id, INT64_MIN, INT64_MAX, actuals); !read) return Fail(read);
    const std::size_t n = how == "last" ? 1 : static_cast<std::size_t>(k);
    if (actuals.size() < n) {
      return Status::Conflict("only " + std::to_string(actuals.size()) + " retained actuals, " +
                              std::to_string(n) + " needed");
    }
    double sum = 0;
    for (std::size_t i = actuals.size() - n; i < actuals.size(); ++i) sum += actuals[i].value;
    new_level = sum / static_cast<double>(n);
  }
  if (!std::isfinite(new_level) || std::fabs(new_level) > monitors::kMaxActual)
    return Status::Invalid("field value: the new level must be a finite number within +/-" +
                           std::to_string(monitors::kMaxActual));
  const Adjustment adj{s.state.last_period, new_level};
  char level_text[32];
  std::snprintf(level_text, sizeof level_text, "%.10g", new_level);
  const std::string detail =
      std::string("level ") + level_text + " (" + how + ")" + (note.empty() ? "" : ": " + note);
  Status written = store_.Begin();
  if (written) written = store_.PutAdjustment(s.id, adj);
  if (written) written = store_.Audit(clock_(), who, "reset", std::string(s.key), detail);
  if (!written) {
    store_.Rollback();
    return Fail(written);
  }
  monitors::SeriesState next = s.state;
  Relevel(next, new_level);
  const std::size_t mark = alerts_.Mark();
  AlertCounts counts;
  Status done = alerts_.ResolveSeries(
      static_cast<std::size_t>(pos), "reset", who, [this](std::size_t i) { return Info(i); },
      clock_(), counts);
  if (done) done = store_.UpdateState(s.id, next);
  if (done) done = store_.Commit();
  if (!done) {
    store_.Rollback();
    alerts_.RollbackTo(mark);
    return Fail(done);
  }
  alerts_.Forget();
  s.state = std::move(next);
  NoteChanged(static_cast<std::size_t>(pos));
  Committed(counts);
  if (sharing()) PublishChanges({static_cast<std::size_t>(pos)}, {});
  return new_level;
}

void Engine::Committed(const AlertCounts& c) {
  counters_.alerts_opened += c.opened;
  counters_.alerts_escalated += c.escalated;
  counters_.alerts_resolved += c.resolved;
  counters_.alerts_grouped += c.grouped;
  if (c.notified && on_outbox_) on_outbox_();
}

EngineSnapshot Engine::Snapshot() const {
  EngineSnapshot out;
  out.queue_capacity = settings_->server.queue_depth;
  for (const config::Policy& p : settings_->policies) {
    PolicyHealth h;
    h.policy = p.name;
    h.trigg_at_most.assign(std::size(kTriggBounds) + 1, 0);
    h.cusum_at_most.assign(std::size(kCusumBounds) + 1, 0);
    h.last_actual_ms = LastArrival(p.name);
    auto b = bias_.find(&p);
    if (b != bias_.end() && b->second.actuals > 0) {
      h.has_bias = true;
      h.bias = b->second.errors / b->second.actuals;
    }
    out.policies.push_back(std::move(h));
  }
  alerts_.Tally([&](std::size_t index, std::size_t rule, const char* state,
                    monitors::Severity severity) {
    const Series& s = series_[index];
    const std::string& rule_name = s.policy->spec.rules[rule].name;
    for (AlertTally& t : out.alerts)
      if (t.policy == s.policy->name && t.rule == rule_name && t.state == state &&
          t.severity == monitors::SeverityName(severity)) {
        ++t.count;
        return;
      }
    out.alerts.push_back({s.policy->name, rule_name, monitors::SeverityName(severity), state, 1});
  });
  return out;
}

void AddSeriesHealth(const ReadView& view, EngineSnapshot& out) {
  const auto& policies = view.settings->policies;
  if (out.policies.size() != policies.size()) return;  // taken with other settings: a defect
  // per policy: the opted-in top series by |T| (a small heap of K)
  std::vector<std::vector<PolicyHealth::Top>> top(out.policies.size());
  auto smaller = [](const PolicyHealth::Top& a, const PolicyHealth::Top& b) {
    return std::fabs(a.trigg) > std::fabs(b.trigg);
  };
  for (std::size_t i = 0; i < view.size(); ++i) {
    const ReadRow& r = view.rows[i];
    PolicyHealth& h = out.policies[r.policy];
    ++h.series[static_cast<int>(StatusOf(view, i))];
    if (r.flags & ReadRow::kWarming) continue;
    if (!std::isnan(r.trigg)) {
      const double v = std::fabs(r.trigg);
      std::size_t k = 0;
      while (k < std::size(kTriggBounds) && v > kTriggBounds[k]) ++k;
      ++h.trigg_at_most[k];
    }
    if (!std::isnan(r.cusum)) {
      const double v = std::fabs(r.cusum);
      std::size_t k = 0;
      while (k < std::size(kCusumBounds) && v > kCusumBounds[k]) ++k;
      ++h.cusum_at_most[k];
    }
    const std::size_t k_top = static_cast<std::size_t>(policies[r.policy].export_top_series);
    if (k_top && !std::isnan(r.trigg)) {
      auto& heap = top[r.policy];
      heap.push_back({std::string(view.key(i)), r.trigg, std::isnan(r.cusum) ? 0.0 : r.cusum});
      std::push_heap(heap.begin(), heap.end(), smaller);
      if (heap.size() > k_top) {
        std::pop_heap(heap.begin(), heap.end(), smaller);
        heap.pop_back();
      }
    }
  }
  for (std::size_t p = 0; p < out.policies.size(); ++p) {
    PolicyHealth& h = out.policies[p];
    for (std::size_t k = 1; k < h.trigg_at_most.size(); ++k)
      h.trigg_at_most[k] += h.trigg_at_most[k - 1];
    for (std::size_t k = 1; k < h.cusum_at_most.size(); ++k)
      h.cusum_at_most[k] += h.cusum_at_most[k - 1];
    std::sort_heap(top[p].begin(), top[p].end(), smaller);
    h.top = std::move(top[p]);
  }
}

std::int64_t Engine::LastArrival(const std::string& policy) const {
  auto it = last_arrival_.find(policy);
  return it == last_arrival_.end() ? 0 : it->second;
}

}  // namespace forewarden

namespace forewarden {

std::int64_t Engine::NextAlertId(std::size_t index) {
  Series& s = series_[index];
  if (s.part < 0 || s.episodes >= (1 << 16)) return 0;  // the store chooses (not shared)
  const std::int64_t id = ((static_cast<std::int64_t>(s.part) + 1) << 43) |
                          (static_cast<std::int64_t>(s.ordinal) << 16) | s.episodes;
  ++s.episodes;
  // in the alert's transaction: rolled back with it (a batch's undo restores the count)
  if (Status kept = store_.SetEpisodes(s.id, s.episodes); !kept) Fail(kept.message());
  return id;
}

void Engine::PublishChanges(std::vector<std::size_t> changed,
                            const std::vector<std::int32_t>& moved) {
  const std::vector<std::size_t> alerted = alerts_.TakeChanged();
  changed.insert(changed.end(), alerted.begin(), alerted.end());
  std::sort(changed.begin(), changed.end());
  changed.erase(std::unique(changed.begin(), changed.end()), changed.end());
  std::vector<ChangeRecord> out;
  out.reserve(changed.size() + moved.size());
  std::vector<std::int32_t> parts(moved);
  // one read transaction for every export: a lock taken once, not per statement
  if (Status begun = store_.Begin(); !begun) {
    Fail(begun.message());
    return;
  }
  struct EndRead {
    Store& store;
    ~EndRead() { store.Rollback(); }
  } end_read{store_};
  for (std::size_t i : changed) {
    if (i >= series_.size()) continue;
    const Series& s = series_[i];
    if (s.part < 0) continue;
    auto pos = positions_.find(s.part);
    SeriesHead head{s.key,
                    s.policy->name,
                    label_sets_[s.labels],
                    SeriesPlace{s.part, s.ordinal, s.episodes},
                    EncodeState(s.state),
                    pos == positions_.end() ? 0 : pos->second.next};
    std::string record;
    if (Status exported = handover_.Export(s.id, head, record); !exported) {
      // committed here but not in the changelog: the next owner would miss it
      Fail(exported.message());
      return;
    }
    out.push_back({s.part, std::string(s.key), std::move(record), head.through});
    parts.push_back(s.part);
  }
  std::sort(parts.begin(), parts.end());
  parts.erase(std::unique(parts.begin(), parts.end()), parts.end());
  for (std::int32_t part : parts) {  // after the series records: a position closes them
    auto pos = positions_.find(part);
    auto next = next_ordinal_.find(part);
    const std::string position =
        Handover::Position(pos == positions_.end() ? SourceOffset{"", part, 0} : pos->second,
                           next == next_ordinal_.end() ? 0 : next->second, install_id_);
    out.push_back({part, kPositionKey, position});
  }
  if (!out.empty()) publish_(std::move(out));
}

std::vector<std::int32_t> Engine::HeldPartitions() const {
  std::vector<std::int32_t> out;
  for (const auto& [part, position] : positions_) out.push_back(part);
  for (const auto& [part, next] : next_ordinal_)
    if (!positions_.count(part)) out.push_back(part);
  std::sort(out.begin(), out.end());
  return out;
}

Status Engine::Adopt(const std::string& topic, std::int32_t part,
                     const std::vector<std::string>& records, const std::string& position,
                     bool seat) {
  if (std::string sticky = failure(); !sticky.empty()) return Status::StoreFailed(sticky);
  // lazily written states first: the reload below reads every series from the store
  if (dirty_count_) {
    if (Status flushed = FlushAll(); !flushed) return Fail(flushed);
    ClearDirty();
  }
  if (Status begun = store_.Begin(); !begun) return Fail(begun);
  Status done = handover_.Adopt(topic, part, records, position, alerts_.sinks(), clock_());
  if (done) done = store_.Commit();
  if (!done) {
    store_.Rollback();
    if (done.kind() == ErrorKind::kStoreFailed) return Fail(done);
    return done;
  }
  if (on_outbox_) on_outbox_();  // carried notifications
  if (!seat) {
    seating_ = true;  // memory is behind the store until Seat
    return Status::Ok();
  }
  return Seat();
}

Status Engine::Seat() {
  if (Status seated = Reseat(); !seated) return Fail(seated);
  seating_ = false;
  return Status::Ok();
}

Status Engine::Release(const std::vector<std::int32_t>& parts) {
  if (std::string sticky = failure(); !sticky.empty()) return Status::StoreFailed(sticky);
  if (parts.empty()) return Status::Ok();
  if (dirty_count_) {
    if (Status flushed = FlushAll(); !flushed) return Fail(flushed);
    ClearDirty();
  }
  if (Status begun = store_.Begin(); !begun) return Fail(begun);
  Status done = Status::Ok();
  for (std::size_t i = 0; done && i < parts.size(); ++i) done = handover_.DropPartition(parts[i]);
  if (done) done = store_.Commit();
  if (!done) {
    store_.Rollback();
    return Fail(done);
  }
  if (Status seated = Reseat(); !seated) return Fail(seated);
  seating_ = false;
  return Status::Ok();
}

}  // namespace forewarden
