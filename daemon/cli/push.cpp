#include "daemon/cli/push.h"

#include <chrono>
#include <fstream>
#include <nlohmann/json.hpp>
#include <ostream>
#include <thread>
#include <vector>

#include "daemon/common/parse_number.h"
#include "daemon/common/secret_text.h"
#include "daemon/http/http_client.h"

namespace forewarden {

namespace {

// A field of a server's JSON reply, whatever the server sent: a wrong type reads as `fallback`.
template <typename T>
T Field(const nlohmann::json& j, const char* name, T fallback) {
  if (!j.is_object() || !j.contains(name)) return fallback;
  const nlohmann::json& v = j[name];
  if constexpr (std::is_same_v<T, std::string>) {
    return v.is_string() ? v.get<std::string>() : fallback;
  } else {
    return v.is_number_integer() ? v.get<T>() : fallback;
  }
}

}  // namespace

int RunPush(const PushOptions& o, std::ostream& out, std::ostream& err) {
  std::ifstream in(o.file, std::ios::binary);
  if (!in) {
    err << "forewarden push: cannot read " << o.file << '\n';
    return 1;
  }
  std::string token;
  if (!o.token_file.empty()) {
    Result<std::string> read = ReadSecretText(o.token_file, "", "--token-file");
    if (!read) {
      err << "forewarden push: " << read.status().message() << '\n';
      return 1;
    }
    token = std::move(*read);
  }
  std::string header;
  if (!std::getline(in, header)) {
    err << "forewarden push: " << o.file << " is empty\n";
    return 2;
  }
  std::string base = o.url;
  while (!base.empty() && base.back() == '/') base.pop_back();
  const std::string endpoint = base + "/v1/actuals";
  const auto started = std::chrono::steady_clock::now();
  long batches = 0, rows = 0, line_no = 1;
  long totals[6] = {0, 0, 0, 0, 0, 0};
  const char* names[6] = {"applied",    "unchanged",    "restated", "gap_periods_filled",
                          "new_series", "alerts_opened"};
  std::string line;
  bool more = true;
  while (more) {
    std::string body = header + "\n";
    const long first_line = line_no + 1;
    long n = 0;
    while (n < o.batch && (more = static_cast<bool>(std::getline(in, line)))) {
      ++line_no;
      if (line.empty() || line == "\r") continue;
      body += line;
      body += '\n';
      ++n;
    }
    if (n == 0) break;
    HttpResult r;
    std::chrono::milliseconds wait(200);
    for (int attempt = 1;; ++attempt) {
      r = HttpPost(endpoint, "text/csv", body, token, std::chrono::seconds(120), {},
                   TlsClientOptions{o.ca_file});
      if (r.status != 503 || attempt >= o.max_attempts) break;
      // delta-seconds as the service sends; an HTTP date or anything else keeps our own backoff
      if (Result<std::int64_t> secs = ParseWholeNumber(r.retry_after, 0, 3600); secs)
        wait = std::chrono::seconds(*secs);
      std::this_thread::sleep_for(wait);  // backing off from a busy service
      wait = std::min(wait * 2, std::chrono::milliseconds(5000));
    }
    if (r.status == 0) {
      err << "forewarden push: " << endpoint << ": " << r.error << '\n';
      return 1;
    }
    nlohmann::json reply = nlohmann::json::parse(r.body, nullptr, false);
    if (r.status == 400 && reply.is_object() && reply.contains("problems") &&
        reply["problems"].is_array()) {
      err << "forewarden push: lines " << first_line << "-" << line_no << " of " << o.file
          << " were rejected; nothing of them was applied:\n";
      for (const auto& p : reply["problems"]) {
        const long batch_line = Field(p, "line", 0L);
        // line 1 of the batch is the header; its line 2 is first_line of the file
        err << "  line " << (batch_line >= 2 ? first_line + batch_line - 2 : batch_line)
            << ", field " << Field(p, "field", std::string()) << ": "
            << Field(p, "message", std::string()) << '\n';
      }
      err << "earlier batches (" << batches << ", " << rows << " rows) were applied\n";
      return 2;
    }
    if (r.status != 200) {
      err << "forewarden push: HTTP " << r.status << ": " << r.body;
      err << "earlier batches (" << batches << ", " << rows << " rows) were applied\n";
      return 1;
    }
    ++batches;
    rows += n;
    for (int i = 0; i < 6; ++i) totals[i] += Field(reply, names[i], 0L);
  }
  const double seconds =
      std::chrono::duration<double>(std::chrono::steady_clock::now() - started).count();
  out << "pushed " << rows << " rows in " << batches << " batches to " << endpoint << " in "
      << static_cast<double>(static_cast<long>(seconds * 1000)) / 1000.0 << " s";
  if (seconds > 0)
    out << " (" << static_cast<long>(static_cast<double>(rows) / seconds) << " rows/s)";
  out << '\n';
  for (int i = 0; i < 6; ++i) out << "  " << names[i] << ": " << totals[i] << '\n';
  return 0;
}

}  // namespace forewarden
