#include "daemon/cli/export.h"

#include <strings.h>
#include <unistd.h>

#include <algorithm>
#include <cctype>
#include <chrono>
#include <cstdio>
#include <ostream>
#include <thread>

#include "daemon/common/parse_number.h"
#include "daemon/common/secret_text.h"
#include "daemon/http/http_client.h"

namespace forewarden {

namespace {

std::string QueryEncode(const std::string& text) {
  static constexpr char kHex[] = "0123456789ABCDEF";
  std::string out;
  for (char c : text) {
    const auto u = static_cast<unsigned char>(c);
    if (std::isalnum(u) || c == '-' || c == '_' || c == '.' || c == '~' || c == ':') {
      out += c;
    } else {
      out += '%';
      out += kHex[u >> 4];
      out += kHex[u & 15];
    }
  }
  return out;
}

std::string HeaderOf(const HttpResult& r, const char* name) {
  for (const auto& [n, v] : r.headers)
    if (strcasecmp(n.c_str(), name) == 0) return v;
  return "";
}

}  // namespace

int RunExport(const ExportOptions& o, std::ostream& out, std::ostream& err) {
  std::string token;
  if (!o.token_file.empty()) {
    Result<std::string> read = ReadSecretText(o.token_file, "", "--token-file");
    if (!read) {
      err << "forewarden export: " << read.status().message() << '\n';
      return 1;
    }
    token = std::move(*read);
  }
  std::string base = o.url;
  while (!base.empty() && base.back() == '/') base.pop_back();
  std::string url = base + "/v1/forecasts?horizon=" + std::to_string(o.horizon) +
                    "&format=" + QueryEncode(o.format);
  if (!o.policy.empty()) url += "&policy=" + QueryEncode(o.policy);
  if (!o.label.empty()) url += "&label=" + QueryEncode(o.label);
  const std::string partial = o.out + ".partial";
  const auto started = std::chrono::steady_clock::now();
  std::chrono::milliseconds wait(200);
  HttpResult r;
  long lines = 0;
  bool write_failed = false;
  for (int attempt = 1;; ++attempt) {
    std::FILE* f = std::fopen(partial.c_str(), "wb");
    if (!f) {
      err << "forewarden export: cannot write " << partial << '\n';
      return 1;
    }
    lines = 0;
    write_failed = false;
    r = HttpGet(
        url, token, std::chrono::seconds(60),
        [&](std::string_view piece) {
          for (char c : piece) lines += c == '\n';
          if (std::fwrite(piece.data(), 1, piece.size(), f) != piece.size()) {
            write_failed = true;
            return false;
          }
          return true;
        },
        TlsClientOptions{o.ca_file});
    if (std::fflush(f) != 0 || fsync(fileno(f)) != 0) write_failed = true;
    std::fclose(f);
    if (r.status != 503 || attempt >= o.max_attempts) break;
    if (Result<std::int64_t> secs = ParseWholeNumber(r.retry_after, 0, 3600); secs)
      wait = std::chrono::seconds(*secs);
    std::this_thread::sleep_for(wait);  // backing off from a busy service
    wait = std::min(wait * 2, std::chrono::milliseconds(5000));
  }
  auto fail = [&](const std::string& why) {
    std::remove(partial.c_str());
    err << "forewarden export: " << why << "; " << o.out << " was not written\n";
    return 1;
  };
  if (write_failed) return fail("writing " + partial + " failed (disk full?)");
  if (r.status == 0) return fail(url + ": " + r.error);
  if (r.status != 200) return fail("HTTP " + std::to_string(r.status) + ": " + r.body);
  if (!r.complete) return fail("the service ended the export before its end");
  const long header_lines = o.format == "csv" ? 1 : 0;
  Result<std::int64_t> rows = ParseWholeNumber(HeaderOf(r, "Forewarden-Rows"), 0, INT64_MAX);
  if (!rows || *rows != lines - header_lines)
    return fail("received " + std::to_string(lines - header_lines) + " rows, the service sent " +
                HeaderOf(r, "Forewarden-Rows"));
  if (std::rename(partial.c_str(), o.out.c_str()) != 0)
    return fail("cannot rename " + partial + " to " + o.out);
  const double seconds =
      std::chrono::duration<double>(std::chrono::steady_clock::now() - started).count();
  out << "exported " << *rows << " forecasts of " << HeaderOf(r, "Forewarden-Series")
      << " series (as of " << HeaderOf(r, "Forewarden-As-Of") << ") to " << o.out << " in "
      << static_cast<double>(static_cast<long>(seconds * 1000)) / 1000.0 << " s\n";
  return 0;
}

}  // namespace forewarden
