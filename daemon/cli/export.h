// `forewarden export --url URL --out FILE [--policy P] [--label NAME:VALUE] [--horizon H]
// [--format csv|ndjson] [--token-file F] [--ca-file F]`: fetches GET /v1/forecasts from a
// running service into FILE. The body is written to FILE.partial as it arrives and renamed to
// FILE only when it is complete (the last chunk came and the row count equals the service's
// Forewarden-Rows), so a loader watching FILE never reads half an export; an export that fails
// leaves no FILE.partial behind and an older FILE untouched.
#pragma once

#include <iosfwd>
#include <string>

namespace forewarden {

struct ExportOptions {
  std::string url;  // base URL, e.g. http://127.0.0.1:8700
  std::string out;  // the file to write
  std::string policy, label;
  int horizon = 13;
  std::string format = "csv";
  std::string token_file;  // bearer token (when reads need one)
  std::string ca_file;     // https://: a CA (PEM) trusted besides the system's store
  int max_attempts = 10;   // while the service answers 503 (busy)
};

int RunExport(const ExportOptions& options, std::ostream& out, std::ostream& err);

}  // namespace forewarden
