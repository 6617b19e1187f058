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

// POSTs `body` to an http:// URL (host, optional port, path). `token`: a bearer token or "";
// `headers` are added as given.
HttpResult HttpPost(const std::string& url, const std::string& content_type,
                    const std::string& body, const std::string& token, std::chrono::seconds timeout,
                    const HttpHeaders& headers = {});

}  // namespace forewarden
