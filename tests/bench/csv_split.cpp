// Baseline (a) of the replay benchmark: read a CSV with the same reader replay uses and split
// every record into fields, doing nothing else. Prints rows and fields read.
#include <cstdio>
#include <string>
#include <vector>

#include "daemon/common/csv.h"

int main(int argc, char** argv) {
  if (argc != 2) {
    std::fprintf(stderr, "usage: forewarden_bench_csv FILE.csv\n");
    return 2;
  }
  forewarden::CsvReader in(argv[1]);
  std::vector<std::string_view> fields;
  long rows = 0, nfields = 0, bytes = 0;
  while (in.Next(fields)) {
    ++rows;
    nfields += static_cast<long>(fields.size());
    for (auto f : fields) bytes += static_cast<long>(f.size());
  }
  if (!in.ok()) {
    std::fprintf(stderr, "%s\n", in.error().c_str());
    return 1;
  }
  std::printf("%ld rows, %ld fields, %ld field bytes\n", rows, nfields, bytes);
  return 0;
}
