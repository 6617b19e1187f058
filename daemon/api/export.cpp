#include "daemon/api/export.h"

#include <cmath>

#include "daemon/common/text_out.h"
#include "monitors/interval.h"
#include "monitors/period.h"

namespace forewarden {

ForecastSeeds TakeForecastSeeds(Engine& engine, const ExportQuery& q, LabelFilter& labels) {
  ForecastSeeds out;
  out.horizon = q.horizon;
  out.ndjson = q.ndjson;
  out.as_of_ms = engine.now_ms();
  out.view = engine.ReadSnapshot();
  const ReadView& view = *out.view;
  std::vector<double> terms(static_cast<std::size_t>(q.horizon));
  engine.ForEachSeries([&](const SeriesView& v) {
    if (!q.policy.empty() && v.policy != q.policy) return;
    if (v.index >= view.size() || !labels.Matches(view.labels(v.index))) return;
    ++out.matched;
    const monitors::SeriesState& s = *v.state;
    if (!s.started) return;
    const monitors::PolicySpec& spec = v.spec->spec;
    ForecastSeeds::Row row;
    row.series = static_cast<std::uint32_t>(v.index);
    row.last_period = static_cast<std::int32_t>(s.last_period);
    row.constants = monitors::EffectiveConstants(spec, s);
    row.mad = s.stats.mad;
    const int n = monitors::SeasonTermsAhead(spec.method, row.constants, q.horizon);
    if (!monitors::SeedAhead(spec.method, row.constants, s.model, s.next_index, q.horizon, row.seed,
                             terms.data()))
      return;
    row.season = static_cast<std::uint32_t>(out.season_terms.size());
    out.season_terms.insert(out.season_terms.end(), terms.begin(), terms.begin() + n);
    out.rows.push_back(row);
  });
  return out;
}

namespace {

constexpr std::size_t kPieceBytes = 256 << 10;

}  // namespace

long WriteForecasts(const ForecastSeeds& seeds, BodyStream& out) {
  const ReadView& view = *seeds.view;
  const int horizon = seeds.horizon;
  TextOut text(nullptr);
  if (!seeds.ndjson) text.Put("key,policy,period,h,forecast,lower,upper\n");
  std::vector<double> forecast(static_cast<std::size_t>(horizon));
  std::vector<double> variance(static_cast<std::size_t>(horizon));
  char period[32];
  long sent = 0;
  for (const ForecastSeeds::Row& row : seeds.rows) {
    const config::Policy& policy = view.policy(row.series);
    const monitors::Method method = policy.spec.method;
    monitors::ForecastFromSeed(method, row.constants, row.seed,
                               seeds.season_terms.data() + row.season, horizon, forecast.data());
    const bool interval =
        row.mad > 0 && monitors::RelativeVariances(method, row.constants, horizon, variance.data());
    const double one = interval ? monitors::IntervalHalfWidth(policy.spec.coverage, row.mad) : 0;
    const std::string_view key = view.key(row.series);
    for (int h = 1; h <= horizon; ++h) {
      const int len = monitors::FormatPeriodTo(policy.period, row.last_period + h, period);
      const double f = forecast[static_cast<std::size_t>(h - 1)];
      const double half = interval ? one * std::sqrt(variance[static_cast<std::size_t>(h - 1)]) : 0;
      if (seeds.ndjson) {
        text.Put("{\"key\":");
        text.JsonString(key);
        text.Put(",\"policy\":");
        text.JsonString(policy.name);
        text.Put(",\"period\":\"");
        text.Put(std::string_view(period, static_cast<std::size_t>(len)));
        text.Put("\",\"h\":");
        text.Integer(h);
        text.Put(",\"forecast\":");
        text.Number(f);
        text.Put(",\"lower\":");
        if (interval)
          text.Number(f - half);
        else
          text.Put("null");
        text.Put(",\"upper\":");
        if (interval)
          text.Number(f + half);
        else
          text.Put("null");
        text.Put('}');
      } else {
        text.Field(key);
        text.Put(',');
        text.Field(policy.name);
        text.Put(',');
        text.Put(std::string_view(period, static_cast<std::size_t>(len)));
        text.Put(',');
        text.Integer(h);
        text.Put(',');
        text.Number(f);
        text.Put(',');
        if (interval) text.Number(f - half);
        text.Put(',');
        if (interval) text.Number(f + half);
      }
      text.EndLine();
    }
    if (text.View().size() >= kPieceBytes) {
      if (!out.Write(std::string(text.View()))) return sent;
      text.Clear();
    }
    sent += horizon;
  }
  if (!out.Write(std::string(text.View()))) return sent;
  out.Finish();
  return sent;
}

ExportPool::Slot::~Slot() {
  if (!used_) pool_->Release();
}

void ExportPool::Release() {
  std::lock_guard lock(mu_);
  --taken_;
}

void ExportPool::Reap() {
  for (auto it = workers_.begin(); it != workers_.end();) {
    if (it->done->load()) {
      it->thread.join();  // its job has returned; the thread is ending
      it = workers_.erase(it);
    } else {
      ++it;
    }
  }
}

std::shared_ptr<ExportPool::Slot> ExportPool::Reserve() {
  std::lock_guard lock(mu_);
  Reap();
  if (taken_ >= capacity_) return nullptr;
  ++taken_;
  return std::make_shared<Slot>(this);
}

void ExportPool::Run(const std::shared_ptr<Slot>& slot, std::shared_ptr<BodyStream> body,
                     std::function<void()> job) {
  std::lock_guard lock(mu_);
  slot->used_ = true;
  auto done = std::make_shared<std::atomic<bool>>(false);
  std::thread thread([this, job = std::move(job), done, body] {
    try {
      job();
    } catch (...) {
      body->Fail();  // the connection closes without the last chunk: visibly incomplete
    }
    {
      std::lock_guard inner(mu_);
      --taken_;
    }
    done->store(true);
  });
  workers_.push_back(Worker{std::move(thread), std::move(body), std::move(done)});
}

ExportPool::~ExportPool() {
  std::vector<Worker> workers;
  {
    std::lock_guard lock(mu_);
    workers.swap(workers_);
  }
  for (Worker& w : workers) w.body->Cancel();
  for (Worker& w : workers) w.thread.join();
}

}  // namespace forewarden
