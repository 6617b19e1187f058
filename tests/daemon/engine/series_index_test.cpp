#include "daemon/engine/series_index.h"

#include <catch2/catch.hpp>
#include <random>
#include <set>
#include <string>

namespace {
struct KeyOf {
  const std::vector<std::string>* keys;
  std::string_view operator()(std::size_t i) const { return (*keys)[i]; }
};
}  // namespace

TEST_CASE(
    "the series index finds every key it holds and none it does not, through growth and erasure",
    "[unit]") {
  std::vector<std::string> keys;
  forewarden::SeriesIndex<KeyOf> index(KeyOf{&keys});
  for (int i = 0; i < 20000; ++i) {
    keys.push_back("north/store-" + std::to_string(i % 250) + "/sku-" + std::to_string(i));
    index.Insert(keys.back(), keys.size() - 1);
  }
  CHECK(index.size() == 20000);
  for (std::size_t i = 0; i < keys.size(); ++i)
    REQUIRE(index.Find(keys[i]) == static_cast<long>(i));
  CHECK(index.Find("south/none") == -1);
  // erase from the back (what the engine does when a batch is rolled back), then some more
  std::mt19937 gen(11);
  while (keys.size() > 15000) {
    index.Erase(keys.back());
    keys.pop_back();
  }
  for (std::size_t i = 0; i < keys.size(); ++i)
    REQUIRE(index.Find(keys[i]) == static_cast<long>(i));
  CHECK(index.Find("north/store-0/sku-19999") == -1);
  CHECK(index.size() == 15000);
  keys.push_back("north/store-0/sku-19999");
  index.Insert(keys.back(), keys.size() - 1);
  CHECK(index.Find("north/store-0/sku-19999") == 15000);
  // erase at random places: every other key is still found through the shifted chains
  std::set<std::size_t> gone;
  for (int k = 0; k < 5000; ++k) {
    const std::size_t i = gen() % keys.size();
    if (gone.insert(i).second) index.Erase(keys[i]);
  }
  for (std::size_t i = 0; i < keys.size(); ++i)
    REQUIRE(index.Find(keys[i]) == (gone.count(i) ? -1 : static_cast<long>(i)));
  CHECK(index.size() == keys.size() - gone.size());
}
