// A small blocking HTTP/1.1 client for `forewarden push` (Beast stays in the .cpp).
#pragma once

#include <chrono>
#include <string>

namespace forewarden {

struct HttpResult {
  int status = 0;            // 0: no HTTP answer (see error)
  std::string body;
  std::string retry_after;   // the Retry-After header, if any
  std::string error;         // connection or protocol failure
};

// POSTs `body` to an http:// URL (host, optional port, path). `token`: a bearer token or "".
HttpResult HttpPost(const std::string& url, const std::string& content_type,
                    const std::string& body, const std::string& token,
                    std::chrono::seconds timeout);

}  // namespace forewarden
