// `forewarden push FILE --url URL [--batch N] [--token-file F] [--ca-file F]`: sends an actuals CSV
// to a running service in batches (each all or nothing), retrying politely while the service is
// busy, and reports what happened. Problems are reported with the line numbers of FILE.
#pragma once

#include <iosfwd>
#include <string>

namespace forewarden {

struct PushOptions {
  std::string file;
  std::string url;         // base URL, e.g. http://127.0.0.1:8700
  long batch = 5000;       // rows per request
  std::string token_file;  // bearer token for the write endpoint
  std::string ca_file;     // https://: a CA (PEM) trusted besides the system's store
  int max_attempts = 10;   // per batch, while the service answers 503
};

int RunPush(const PushOptions& options, std::ostream& out, std::ostream& err);

}  // namespace forewarden
