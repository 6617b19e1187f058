#include "daemon/common/text_out.h"

#include <catch2/catch.hpp>
#include <charconv>
#include <cstdlib>
#include <random>

using forewarden::TextOut;

namespace {
// std::to_chars' shortest form, except that TextOut prints negative zero as "0".
std::string Reference(double v) {
  if (v == 0.0) return "0";
  char buf[64];
  return std::string(buf, std::to_chars(buf, buf + sizeof buf, v).ptr);
}
}  // namespace

TEST_CASE("numbers print as the shortest text that reads back the same", "[unit]") {
  TextOut out(nullptr);
  std::mt19937_64 gen(99);
  std::uniform_real_distribution<double> u(-1e6, 1e6);
  for (int i = 0; i < 20000; ++i) {
    const double v = i % 3 == 0 ? std::round(u(gen) / 7) : u(gen) / (1 + i % 13);
    out.Clear();
    out.Number(v);
    const std::string text(out.View());
    REQUIRE(text == Reference(v));
    REQUIRE(std::strtod(text.c_str(), nullptr) == v);
  }
  // the whole-number fast path gives the same text as to_chars(double) up to its edge
  for (double v : {0.0, -0.0, 1.0, -1.0, 99999.0, -99999.0, 100000.0, 1e15, 123456789.0, 0.1}) {
    out.Clear();
    out.Number(v);
    CHECK(std::string(out.View()) == Reference(v));
  }
  out.Clear();
  out.RepeatedNumber(0.2);
  out.RepeatedNumber(0.2);
  out.RepeatedNumber(0.35);
  CHECK(std::string(out.View()) == "0.20.20.35");
}

TEST_CASE("CSV fields are quoted only when they must be", "[unit]") {
  TextOut out(nullptr);
  out.Field("north/store-014/sku-20931");
  out.Put('|');
  out.Field("a,b");
  out.Put('|');
  out.Field("say \"hi\"");
  CHECK(std::string(out.View()) == "north/store-014/sku-20931|\"a,b\"|\"say \"\"hi\"\"\"");
}
