// forewarden: watches exponential-smoothing forecasts of sales series. Thin main.
#include <iostream>
#include <string>
#include <vector>

#include "daemon/cli/commands.h"

int main(int argc, char** argv) {
  std::ios::sync_with_stdio(false);
  std::vector<std::string> args(argv + 1, argv + argc);
  return forewarden::RunCommand(args, std::cout, std::cerr);
}
