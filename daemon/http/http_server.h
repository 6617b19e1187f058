// The HTTP/1.1 server (Boost.Beast lives only in http_server.cpp and http_client.cpp; this
// header includes no Boost). One session per connection, a fresh parser per request with an
// explicit body limit, a deadline on every read and write, keep-alive. The handler may answer
// from any thread, exactly once. Graceful shutdown: stop accepting, close idle connections,
// let requests in flight get their answers, then stop after at most the grace period.
#pragma once

#include "daemon/common/status.h"

#include <atomic>
#include <chrono>
#include <condition_variable>
#include <cstdint>
#include <deque>
#include <functional>
#include <memory>
#include <mutex>
#include <string>
#include <utility>
#include <vector>

namespace forewarden {

struct HttpRequest {
  std::string method;
  int version = 11;    // 10 for HTTP/1.0, 11 for HTTP/1.1
  std::string target;  // path and query, as sent
  std::string content_type;
  std::string authorization;
  std::string if_none_match;  // a page file's tag the browser holds
  std::string body;
};

// A response body made on another thread while it is sent: the producer writes pieces, the
// server sends each as it comes (chunked on HTTP/1.1; on HTTP/1.0 the connection closes after
// the body), so a body of any size costs at most `max_buffered` bytes of memory. A body that
// ends by Fail (or a producer that stops without Finish) closes the connection without the last
// chunk: the client sees an incomplete body, never a short one that looks whole.
class BodyStream {
 public:
  explicit BodyStream(std::size_t max_buffered = 4 << 20) : max_buffered_(max_buffered) {}
  BodyStream(const BodyStream&) = delete;
  BodyStream& operator=(const BodyStream&) = delete;

  // Producer. Waits while `max_buffered` bytes are waiting to be sent; false when the
  // connection has gone (or the server stops): the producer should stop.
  bool Write(std::string piece);
  void Finish();  // the body is complete
  void Fail();    // the body cannot be completed
  // Either side: the reader has gone; a waiting Write returns false.
  void Cancel();
  bool cancelled() const;

  // Server. kData fills `out` with everything waiting; kWait: nothing yet, `wake` will be
  // called (once, on the producer's thread) when there is.
  enum class Take { kData, kWait, kEnd, kFailed };
  Take Next(std::string& out, std::function<void()> wake);

 private:
  const std::size_t max_buffered_;
  mutable std::mutex mu_;
  std::condition_variable room_;
  std::deque<std::string> pieces_;
  std::size_t buffered_ = 0;
  enum class End { kNone, kFinished, kFailed } end_ = End::kNone;
  void Close(End how);
  bool cancelled_ = false;
  std::function<void()> wake_;
};

struct HttpResponse {
  int status = 200;
  std::string content_type = "application/json";
  std::string body;
  std::vector<std::pair<std::string, std::string>> headers;
  // When set, the body comes from here instead of `body` (sent as it is produced).
  std::shared_ptr<BodyStream> stream;
};

using Respond = std::function<void(HttpResponse)>;
using Handler = std::function<void(HttpRequest&&, Respond)>;

struct HttpOptions {
  std::string host = "127.0.0.1";
  std::uint16_t port = 0;  // 0: any free port (see HttpServer::port())
  std::size_t max_body_bytes = 16 << 20;
  std::size_t max_connections = 256;
  std::chrono::seconds header_timeout{10};  // a new connection must deliver its request within
  std::chrono::seconds idle_timeout{60};    // a kept-alive connection may wait this long
};

// Counted rejections (read by /metrics later; all monotonic).
struct HttpCounters {
  std::atomic<long> requests{0};
  std::atomic<long> body_too_large{0};
  std::atomic<long> too_many_connections{0};
  std::atomic<long> timeouts{0};
  std::atomic<long> malformed{0};
  std::atomic<long> connections{0};  // open now
  std::atomic<long> tls_failed{0};   // TLS handshakes that failed or timed out
};

class HttpServer {
 public:
  HttpServer(HttpOptions options, Handler handler);
  ~HttpServer();

  // Binds and listens: invalid (a bad address) or io (in use, not on this machine).
  Status Start();
  // Thread-safe. Serves TLS (1.2 and newer) with this certificate chain and key (PEM) from the
  // next connection on; connections already open keep theirs. Invalid (an unreadable file, a
  // key that does not match) changes nothing.
  Status UseTls(const std::string& cert_file, const std::string& key_file);
  // The same checks without installing anything (a reload checks before it applies).
  Status CheckTls(const std::string& cert_file, const std::string& key_file);
  std::uint16_t port() const;
  // Calls `on_signal(signo)` on the server thread for SIGINT, SIGTERM and SIGHUP.
  void OnSignals(std::function<void(int)> on_signal);
  // Runs the server on the calling thread until Shutdown has completed.
  void Run();
  // Thread-safe. Begins a graceful shutdown bounded by `grace`.
  void Shutdown(std::chrono::seconds grace);

  const HttpCounters& counters() const;

 private:
  struct Impl;
  std::shared_ptr<Impl> impl_;
};

}  // namespace forewarden
