// The fold a restore makes of a changelog partition (daemon/feeds/changelog.h): which record of
// each series a new owner adopts, worked by hand on short logs.
#include <algorithm>
#include <catch2/catch.hpp>

#include "daemon/feeds/changelog.h"

using forewarden::ChangelogFold;
using forewarden::ChangelogPartition;

namespace {

std::string Position(long next) {
  return "{\"topic\":\"sales\",\"next\":" + std::to_string(next) + ",\"next_ordinal\":2}";
}

std::vector<std::string> Kept(ChangelogFold& fold, ChangelogPartition& out) {
  fold.Finish(out);
  std::sort(out.records.begin(), out.records.end());
  return out.records;
}

}  // namespace

TEST_CASE("a restore keeps each series' newest record that a position covers", "[unit]") {
  ChangelogFold fold;
  ChangelogPartition out;
  SECTION("commits with their positions: the newest of each series") {
    fold.Series("a", "a@10", 10);
    fold.Series("b", "b@10", 10);
    fold.Position(Position(10));
    fold.Series("a", "a@20", 20);
    fold.Position(Position(20));
    REQUIRE(Kept(fold, out) == std::vector<std::string>{"a@20", "b@10"});
    REQUIRE(out.position == Position(20));
    REQUIRE(out.left_out == 0);
  }
  SECTION("a writer that died before its position: its records are left out") {
    fold.Series("a", "a@10", 10);
    fold.Position(Position(10));
    fold.Series("a", "a@30", 30);  // the commit up to offset 30, its position never written
    // the next owner resumed from 10 and got as far as 25 without touching a
    fold.Series("b", "b@25", 25);
    fold.Position(Position(25));
    REQUIRE(Kept(fold, out) == std::vector<std::string>{"a@10", "b@25"});
    REQUIRE(out.left_out == 1);
  }
  SECTION("a later position that covers it promotes the record") {
    fold.Series("a", "a@30", 30);
    fold.Position(Position(35));
    REQUIRE(Kept(fold, out) == std::vector<std::string>{"a@30"});
  }
  SECTION("a newer record within the position (a hand change) replaces an uncovered one") {
    fold.Series("a", "a@10", 10);
    fold.Position(Position(10));
    fold.Series("a", "a@30", 30);
    fold.Series("a", "a@10-acknowledged", 10);
    REQUIRE(Kept(fold, out) == std::vector<std::string>{"a@10-acknowledged"});
    REQUIRE(out.left_out == 0);
  }
  SECTION("a partition never positioned keeps only records of offset 0 (hand changes)") {
    fold.Series("a", "a@5", 5);
    fold.Series("b", "b@0", 0);
    REQUIRE(Kept(fold, out) == std::vector<std::string>{"b@0"});
    REQUIRE(out.position.empty());
    REQUIRE(out.left_out == 1);
  }
  SECTION("a tombstone removes the series, covered or not") {
    fold.Series("a", "a@10", 10);
    fold.Series("b", "b@10", 10);
    fold.Position(Position(10));
    fold.Tombstone("a");
    REQUIRE(Kept(fold, out) == std::vector<std::string>{"b@10"});
  }
  SECTION("a position that does not read covers nothing beyond offset 0") {
    fold.Series("a", "a@10", 10);
    fold.Position("not json");
    REQUIRE(Kept(fold, out).empty());
    REQUIRE(out.left_out == 1);
  }
}
