#include "daemon/store/store.h"

#include <catch2/catch.hpp>

#include <filesystem>

#include "daemon/store/state_codec.h"
#include "tests/temp_dir.h"

using forewarden::Store;
using testing_support::TempDir;

TEST_CASE("the store keeps series, actuals and adjustments across a reopen", "[integration]") {
  TempDir dir;
  monitors::SeriesState state;
  state.stats.cusum = 12.5;
  state.rules.resize(1);
  std::int64_t id = 0;
  {
    Store store;
    REQUIRE(store.Open(dir.File("data"), true));
    CHECK(store.schema_version() == 7);
    REQUIRE(store.Begin());
    forewarden::Result<std::int64_t> created =
        store.InsertSeries("north/store-1/sku-1", "weekly", "{\"channel\":\"store\"}", state);
    REQUIRE(created);
    id = *created;
    for (int p = 10; p < 15; ++p) REQUIRE(store.PutActual(id, p, p * 1.5));
    REQUIRE(store.PutActual(id, 12, 99.0));  // replaces
    REQUIRE(store.PutAdjustment(id, {13, 42.0}));
    REQUIRE(store.Audit(1, "planner-a", "reset", "north/store-1/sku-1", "note"));
    REQUIRE(store.Commit());
  }
  Store store;
  REQUIRE(store.Open(dir.File("data"), false));
  std::vector<forewarden::StoredSeries> all;
  REQUIRE(store.LoadSeries([&](forewarden::StoredSeries&& s) { all.push_back(std::move(s)); }));
  REQUIRE(all.size() == 1);
  CHECK(all[0].key == "north/store-1/sku-1");
  CHECK(all[0].labels == "{\"channel\":\"store\"}");
  CHECK(all[0].retained == 5);
  CHECK(all[0].oldest_period == 10);
  CHECK(forewarden::EncodeState(all[0].state) == forewarden::EncodeState(state));
  std::vector<forewarden::StoredActual> actuals;
  REQUIRE(store.Actuals(id, 11, 13, actuals));
  REQUIRE(actuals.size() == 3);
  CHECK(actuals[1].value == 99.0);
  forewarden::Result<std::optional<double>> v = store.GetActual(id, 14);
  REQUIRE(v);
  CHECK(*v == std::optional<double>(21.0));
  v = store.GetActual(id, 20);
  REQUIRE(v);
  CHECK_FALSE(v->has_value());
  std::vector<forewarden::Adjustment> adj;
  REQUIRE(store.Adjustments(id, adj));
  REQUIRE(adj.size() == 1);
  CHECK(adj[0].level == 42.0);
  REQUIRE(store.Begin());
  REQUIRE(store.DropBefore(id, 14));
  REQUIRE(store.Commit());
  REQUIRE(store.Actuals(id, 0, 100, actuals));
  CHECK(actuals.size() == 1);
  REQUIRE(store.Adjustments(id, adj));
  CHECK(adj.empty());
}

TEST_CASE("a rolled-back savepoint leaves nothing behind", "[integration]") {
  TempDir dir;
  Store store;
  REQUIRE(store.Open(dir.File("d"), true));
  REQUIRE(store.Begin());
  forewarden::Result<std::int64_t> a = store.InsertSeries("a", "p", "{}", monitors::SeriesState{});
  REQUIRE(a);
  REQUIRE(store.Savepoint());
  REQUIRE(store.InsertSeries("b", "p", "{}", monitors::SeriesState{}));
  REQUIRE(store.PutActual(*a, 1, 1.0));
  REQUIRE(store.RollbackToSavepoint());
  REQUIRE(store.Commit());
  int n = 0;
  REQUIRE(store.LoadSeries([&](forewarden::StoredSeries&& s) {
    ++n;
    CHECK(s.key == "a");
    CHECK(s.retained == 0);
  }));
  CHECK(n == 1);
  // a key is unique
  REQUIRE(store.Begin());
  forewarden::Result<std::int64_t> again =
      store.InsertSeries("a", "p", "{}", monitors::SeriesState{});
  REQUIRE_FALSE(again);
  CHECK(again.status().kind() == forewarden::ErrorKind::kStoreFailed);
  CHECK_THAT(again.status().message(), Catch::Contains("UNIQUE"));
  store.Rollback();
}

TEST_CASE("a version 1 database is migrated and keeps its series and checkpoints",
          "[integration]") {
  TempDir dir;
  std::filesystem::create_directories(dir.File("old"));
  forewarden::Db db;
  REQUIRE(db.Open(dir.File("old") + "/forewarden.db"));
  monitors::SeriesState checkpoint;
  checkpoint.stats.cusum = 3.25;
  const std::string blob = forewarden::EncodeState(checkpoint);
  // the schema exactly as migration 1 created it
  REQUIRE(db.Exec(
      "CREATE TABLE meta(key TEXT PRIMARY KEY, value TEXT NOT NULL);"
      "INSERT INTO meta VALUES('schema_version', '1');"
      "CREATE TABLE series(id INTEGER PRIMARY KEY, key TEXT NOT NULL UNIQUE, policy TEXT NOT NULL,"
      " labels TEXT NOT NULL DEFAULT '{}', state BLOB NOT NULL, checkpoint BLOB NOT NULL);"
      "CREATE TABLE actuals(series_id INTEGER NOT NULL, period INTEGER NOT NULL, value REAL NOT "
      "NULL,"
      " PRIMARY KEY(series_id, period)) WITHOUT ROWID;"
      "CREATE TABLE adjustments(series_id INTEGER NOT NULL, period INTEGER NOT NULL, level REAL "
      "NOT NULL,"
      " seq INTEGER PRIMARY KEY AUTOINCREMENT);"
      "CREATE TABLE audit(id INTEGER PRIMARY KEY, at_ms INTEGER NOT NULL, who TEXT NOT NULL,"
      " action TEXT NOT NULL, series_key TEXT NOT NULL, detail TEXT NOT NULL);"));
  forewarden::Stmt insert =
      db.Prepare("INSERT INTO series VALUES(7, 'w/a', 'weekly', '{}', ?1, ?1)");
  REQUIRE(insert.BindBlob(1, blob).Run());
  insert = forewarden::Stmt();
  db = forewarden::Db();
  Store store;
  REQUIRE(store.Open(dir.File("old"), true));
  CHECK(store.schema_version() == 7);
  monitors::SeriesState loaded;
  REQUIRE(store.LoadCheckpoint(7, loaded));
  CHECK(loaded.stats.cusum == 3.25);
  int n = 0;
  REQUIRE(store.LoadSeries([&](forewarden::StoredSeries&& s) {
    ++n;
    CHECK(s.key == "w/a");
  }));
  CHECK(n == 1);
}
