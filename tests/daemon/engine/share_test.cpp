// Instances sharing series (Engine::ShareSeries, Adopt, Release): a partition's series move
// from one store to another through the records the engine publishes, with their states, their
// open alerts and alert ids made from the partition, the series' number and its episode count.
// Real SQLite files in temporary folders; the publisher is a vector.
#include <catch2/catch.hpp>
#include <future>
#include <map>
#include <mutex>

#include "config/load.h"
#include "daemon/engine/engine.h"
#include "daemon/store/state_codec.h"
#include "tests/temp_dir.h"

using forewarden::ChangeRecord;
using forewarden::Engine;
using forewarden::IngestReply;
using forewarden::IngestRow;
using forewarden::SourceOffset;
using forewarden::Status;
using testing_support::TempDir;

namespace {

std::shared_ptr<const config::Settings> Settings(const std::string& data) {
  auto r = config::LoadSettingsText(
      "server: {data: '" + data +
          "'}\n"
          "alerts: {storm_threshold: 0}\n"
          "policies:\n"
          "  - {name: weekly, match: '*', period: week, alpha: 0.3, history: 8, warmup: 1,\n"
          "     rules: [{name: jump, signal: error, limit: 3, resolve_after: 1}]}\n",
      "test.yaml");
  REQUIRE(r.ok());
  return std::make_shared<const config::Settings>(std::move(r.settings));
}

// An engine that shares series, its published records kept in order.
struct Shared {
  TempDir dir;
  Engine engine;
  std::mutex mu;
  std::vector<ChangeRecord> published;
  Shared() : engine(Settings(dir.File("data")), [] { return std::int64_t{1'767'600'000'000}; }) {
    engine.ShareSeries([this](std::vector<ChangeRecord>&& records) {
      std::lock_guard lock(mu);
      for (ChangeRecord& r : records) published.push_back(std::move(r));
    });
    REQUIRE(engine.Start());
  }
  ~Shared() { engine.Stop(); }
  // The newest record of each series key of partition `part`, and its newest position.
  std::pair<std::vector<std::string>, std::string> Newest(std::int32_t part) {
    std::lock_guard lock(mu);
    std::map<std::string, std::string> by_key;
    std::string position;
    for (const ChangeRecord& r : published) {
      if (r.partition != part) continue;
      if (r.key == forewarden::kPositionKey)
        position = r.value;
      else
        by_key[r.key] = r.value;
    }
    std::vector<std::string> records;
    for (auto& [k, v] : by_key) records.push_back(v);
    return {records, position};
  }
  template <typename F>
  void On(F fn) {
    std::promise<void> p;
    REQUIRE(engine.Post([&] {
      fn();
      p.set_value();
    }));
    p.get_future().get();
  }
  IngestReply Submit(std::vector<IngestRow> rows, std::vector<SourceOffset> offsets) {
    std::promise<IngestReply> p;
    auto f = p.get_future();
    REQUIRE(engine.Submit(std::move(rows), std::move(offsets),
                          [&](IngestReply r) { p.set_value(std::move(r)); }));
    return f.get();
  }
  std::vector<std::int64_t> OpenAlertIds() {
    std::vector<std::int64_t> ids;
    On([&] {
      forewarden::Stmt q =
          engine.db().Prepare("SELECT id FROM alerts WHERE state != 'resolved' ORDER BY id");
      while (q.Step() && q.Row()) ids.push_back(q.Int(0));
    });
    return ids;
  }
  // Every alert: (id, series key), by id.
  std::vector<std::pair<std::int64_t, std::string>> Alerts() {
    std::vector<std::pair<std::int64_t, std::string>> out;
    On([&] {
      forewarden::Stmt q = engine.db().Prepare("SELECT id, series_key FROM alerts ORDER BY id");
      while (q.Step() && q.Row()) out.emplace_back(q.Int(0), std::string(q.Text(1)));
    });
    return out;
  }
  std::string StateOf(const std::string& key) {
    std::string out;
    On([&] {
      auto v = engine.FindSeries(key);
      if (v) out = forewarden::EncodeState(*v->state);
    });
    return out;
  }
};

IngestRow Row(const std::string& key, std::int64_t week, double v, std::int32_t part) {
  IngestRow r;
  r.line = 1;
  r.series = key;
  r.period = monitors::FormatPeriod(monitors::PeriodKind::kWeek, week);
  r.value = v;
  r.partition = part;
  return r;
}

}  // namespace

TEST_CASE("a shared partition moves to another store with its series, open alerts and ids",
          "[unit]") {
  Shared a;
  std::vector<IngestRow> rows;
  const std::int64_t w0 = 2900;
  // partition 3: two series; the second jumps in its last week (a spike alert opens)
  const double flat[] = {100, 101, 99, 100, 102, 98, 100, 101};
  for (int t = 0; t < 8; ++t) {
    rows.push_back(Row("north/a", w0 + t, flat[t], 3));
    rows.push_back(Row("north/b", w0 + t, t == 7 ? 400 : flat[t], 3));
  }
  rows.push_back(Row("south/c", w0, 50, 5));
  IngestReply r = a.Submit(rows, {{"sales", 3, 16}, {"sales", 5, 1}});
  REQUIRE(r.status == IngestReply::Status::kOk);
  REQUIRE(r.counts.alerts_opened >= 1);

  // id = (partition + 1) * 2^43 + the series' number in its partition * 2^16 + its episode:
  // north/a is number 0, north/b number 1 (first arrival), episodes count from 0
  const std::map<std::string, std::int64_t> number{{"north/a", 0}, {"north/b", 1}};
  std::map<std::string, std::int64_t> episodes;
  const auto before_move = a.Alerts();
  for (const auto& [id, key] : before_move) {
    REQUIRE(id == (std::int64_t{4} << 43) + (number.at(key) << 16) + episodes[key]);
    REQUIRE(id < (std::int64_t{1} << 53));  // exact as a JSON number
    ++episodes[key];
  }
  const std::vector<std::int64_t> open_before = a.OpenAlertIds();
  REQUIRE_FALSE(open_before.empty());

  // what partition 3 published: both series, closed by a position at offset 16
  auto [records, position] = a.Newest(3);
  REQUIRE(records.size() == 2);
  REQUIRE(position.find("\"next\":16") != std::string::npos);
  REQUIRE(position.find("\"next_ordinal\":2") != std::string::npos);

  Shared b;
  Status adopted = Status::Ok();
  b.On([&] { adopted = b.engine.Adopt("sales", 3, records, position); });
  REQUIRE(adopted);
  std::vector<std::int32_t> held;
  b.On([&] { held = b.engine.HeldPartitions(); });
  REQUIRE(held == std::vector<std::int32_t>{3});
  REQUIRE(b.StateOf("north/a") == a.StateOf("north/a"));
  REQUIRE(b.StateOf("north/b") == a.StateOf("north/b"));
  REQUIRE(b.StateOf("south/c").empty());
  REQUIRE(b.OpenAlertIds() == open_before);
  std::vector<SourceOffset> offsets;
  b.On([&] { REQUIRE(b.engine.StoredOffsets(offsets)); });
  REQUIRE(offsets.size() == 1);
  REQUIRE(offsets[0].next == 16);

  // the new owner goes on: a third series is number 2; north/b's next episode is 1
  r = b.Submit({Row("north/d", w0, 10, 3), Row("north/b", w0 + 8, 100, 3),
                Row("north/b", w0 + 9, 100, 3), Row("north/b", w0 + 10, 100, 3),
                Row("north/b", w0 + 11, 100, 3), Row("north/b", w0 + 12, 900, 3)},
               {{"sales", 3, 22}});
  REQUIRE(r.status == IngestReply::Status::kOk);
  // north/b's episodes go on from where they stood; north/d is number 2
  for (const auto& [id, key] : b.Alerts()) {
    if (std::find(before_move.begin(), before_move.end(), std::pair{id, key}) != before_move.end())
      continue;
    const std::int64_t n = key == "north/d" ? 2 : number.at(key);
    REQUIRE(id == (std::int64_t{4} << 43) + (n << 16) + episodes[key]);
    ++episodes[key];
  }
  REQUIRE(episodes["north/b"] > 1);

  // a row of a held series from another partition is a problem naming the field
  r = b.Submit({Row("north/a", w0 + 8, 100, 7)}, {{"sales", 7, 1}});
  REQUIRE(r.status == IngestReply::Status::kRejected);
  REQUIRE(r.problems.at(0).field == "series");
  REQUIRE(r.problems.at(0).message.find("held for partition 3") != std::string::npos);

  // the old owner lets partition 3 go and keeps partition 5
  Status released = Status::Ok();
  a.On([&] { released = a.engine.Release({3}); });
  REQUIRE(released);
  REQUIRE(a.StateOf("north/a").empty());
  REQUIRE_FALSE(a.StateOf("south/c").empty());
  REQUIRE(a.OpenAlertIds().empty());
}

TEST_CASE("a changelog record that does not read is refused and changes nothing", "[unit]") {
  Shared a;
  REQUIRE(a.Submit({Row("north/a", 2900, 5, 2)}, {{"sales", 2, 1}}).status ==
          IngestReply::Status::kOk);
  auto [records, position] = a.Newest(2);
  Shared b;
  Status adopted = Status::Ok();
  b.On([&] { adopted = b.engine.Adopt("sales", 2, records, position); });
  REQUIRE(adopted);
  for (const std::string& bad :
       {std::string("not json"), std::string("{\"key\": \"north/z\"}"),
        std::string("{\"key\": \"north/z\", \"policy\": \"weekly\", \"labels\": \"{}\", "
                    "\"state\": \"zz\", \"checkpoint\": \"\", \"ordinal\": 0, \"episodes\": 0, "
                    "\"actuals\": [], \"adjustments\": [], \"alerts\": [], \"events\": []}"),
        // wrong types: actuals not a list, an alert field that is an object, an unknown column
        std::string("{\"key\": \"north/z\", \"policy\": \"weekly\", \"labels\": \"{}\", "
                    "\"state\": \"\", \"checkpoint\": \"\", \"ordinal\": 0, \"episodes\": 0, "
                    "\"actuals\": \"x\", \"adjustments\": [], \"alerts\": [], \"events\": []}"),
        std::string("{\"key\": \"north/z\", \"policy\": \"weekly\", \"labels\": \"{}\", "
                    "\"state\": \"\", \"checkpoint\": \"\", \"ordinal\": 0, \"episodes\": 0, "
                    "\"actuals\": [], \"adjustments\": [], \"alerts\": [{\"rule\": {}}], "
                    "\"events\": []}"),
        std::string("{\"key\": \"north/z\", \"policy\": \"weekly\", \"labels\": \"{}\", "
                    "\"state\": \"\", \"checkpoint\": \"\", \"ordinal\": 0, \"episodes\": 0, "
                    "\"actuals\": [], \"adjustments\": [], \"alerts\": [{\"id; DROP\": 1}], "
                    "\"events\": []}")}) {
    std::vector<std::string> torn = records;
    torn.push_back(bad);
    b.On([&] { adopted = b.engine.Adopt("sales", 2, torn, position); });
    REQUIRE(adopted.kind() == forewarden::ErrorKind::kInvalid);
    REQUIRE(adopted.message().find("partition 2") != std::string::npos);
    REQUIRE(b.StateOf("north/a") == a.StateOf("north/a"));  // the adoption before stands
    REQUIRE(b.StateOf("north/z").empty());
  }
  REQUIRE(b.engine.failure().empty());
}
