// A small blocking HTTP/1.1 client for `forewarden push` (Beast stays in the .cpp).
#pragma once

#include <chrono>
#include <string>
#include <utility>
#include <vector>

namespace forewarden {

struct HttpResult {
  int status = 0;  // 0: no HTTP answer (see error)
  std::string body;
  std::string retry_after;  // the Retry-After header, if any
  std::string error;        // connection or protocol failure
};

using HttpHeaders = std::vector<std::pair<std::string, std::string>>;

// How an https:// URL is trusted: the system's CA store, plus `ca_file` (PEM) when given.
// The peer's certificate and host name are always verified.
struct TlsClientOptions {
  std::string ca_file;
};

// POSTs `body` to an http:// or https:// URL (host, optional port, path). `token`: a bearer
// token or ""; `headers` are added as given.
HttpResult HttpPost(const std::string& url, const std::string& content_type,
                    const std::string& body, const std::string& token, std::chrono::seconds timeout,
                    const HttpHeaders& headers = {}, const TlsClientOptions& tls = {});

}  // namespace forewarden
