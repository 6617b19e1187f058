// A small blocking HTTP/1.1 client for `forewarden push` and `forewarden export` (Beast stays in
// the .cpp).
#pragma once

#include <chrono>
#include <functional>
#include <string>
#include <string_view>
#include <utility>
#include <vector>

namespace forewarden {

struct HttpResult {
  int status = 0;  // 0: no HTTP answer (see error)
  std::string body;
  std::string retry_after;                                   // the Retry-After header, if any
  std::string error;                                         // connection or protocol failure
  std::vector<std::pair<std::string, std::string>> headers;  // HttpGet: the answer's headers
  bool complete = false;  // HttpGet: the body arrived whole (its last chunk, or all its length)
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

// GETs an http:// or https:// URL and hands a 200 answer's body to `sink` piece by piece as it
// arrives (any size, little memory); other statuses' bodies (up to 1 MiB) go to HttpResult::body.
// `sink` returning false stops the transfer (error "stopped"). `timeout` bounds the connection
// and each wait for more of the answer, not the whole transfer.
using BodySink = std::function<bool(std::string_view piece)>;
HttpResult HttpGet(const std::string& url, const std::string& token, std::chrono::seconds timeout,
                   const BodySink& sink, const TlsClientOptions& tls = {});

}  // namespace forewarden
