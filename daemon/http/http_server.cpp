// Boost.Beast HTTP server; the only translation unit of the service that includes Beast's
// server side (it costs ~15 s to compile).
#include "daemon/http/http_server.h"

#include <boost/asio.hpp>
#include <boost/asio/ssl.hpp>
#include <boost/beast/core.hpp>
#include <boost/beast/http.hpp>
#include <boost/beast/ssl.hpp>
#include <list>
#include <mutex>
#include <optional>

namespace forewarden {

namespace net = boost::asio;
namespace beast = boost::beast;
namespace http = beast::http;
using tcp = net::ip::tcp;
namespace ssl = net::ssl;

bool BodyStream::Write(std::string piece) {
  std::function<void()> wake;
  {
    std::unique_lock lock(mu_);
    room_.wait(lock, [this] { return cancelled_ || buffered_ < max_buffered_; });
    if (cancelled_) return false;
    if (piece.empty()) return true;
    buffered_ += piece.size();
    pieces_.push_back(std::move(piece));
    wake = std::move(wake_);
    wake_ = nullptr;
  }
  if (wake) wake();
  return true;
}

void BodyStream::Finish() {
  Close(End::kFinished);
}

void BodyStream::Fail() {
  Close(End::kFailed);
}

void BodyStream::Close(End how) {
  std::function<void()> wake;
  {
    std::lock_guard lock(mu_);
    if (end_ == End::kNone) end_ = how;
    wake = std::move(wake_);
    wake_ = nullptr;
  }
  if (wake) wake();
}

void BodyStream::Cancel() {
  {
    std::lock_guard lock(mu_);
    cancelled_ = true;
    pieces_.clear();
    buffered_ = 0;
    wake_ = nullptr;
  }
  room_.notify_all();
}

bool BodyStream::cancelled() const {
  std::lock_guard lock(mu_);
  return cancelled_;
}

BodyStream::Take BodyStream::Next(std::string& out, std::function<void()> wake) {
  out.clear();
  {
    std::lock_guard lock(mu_);
    if (pieces_.empty()) {
      if (end_ == End::kFinished) return Take::kEnd;
      if (end_ == End::kFailed || cancelled_) return Take::kFailed;
      wake_ = std::move(wake);
      return Take::kWait;
    }
    out.reserve(buffered_);
    for (std::string& p : pieces_) out += p;
    pieces_.clear();
    buffered_ = 0;
  }
  room_.notify_all();
  return Take::kData;
}

namespace {

// What the session list needs of a session of either kind.
struct SessionBase {
  virtual ~SessionBase() = default;
  virtual void CloseIfIdle() = 0;
};

}  // namespace

struct HttpServer::Impl : std::enable_shared_from_this<HttpServer::Impl> {
  HttpOptions options;
  Handler handler;
  HttpCounters counters;
  net::io_context ioc{1};
  tcp::acceptor acceptor{ioc};
  net::signal_set signals{ioc};
  net::steady_timer grace_timer{ioc};
  std::function<void(int)> on_signal;
  std::atomic<bool> stopping{false};

  template <typename Stream>
  struct Session;
  std::mutex sessions_mu;
  std::list<std::weak_ptr<SessionBase>> sessions;
  // The TLS context new connections take (null: plain HTTP); replaced on reload, while the
  // connections already open keep the one they started with.
  std::mutex tls_mu;
  std::shared_ptr<ssl::context> tls;

  Impl(HttpOptions o, Handler h) : options(std::move(o)), handler(std::move(h)) {}

  void Accept();
  void CloseIdle();
  void MaybeFinish();
};

template <typename Stream>
struct HttpServer::Impl::Session : SessionBase, std::enable_shared_from_this<Session<Stream>> {
  using std::enable_shared_from_this<Session<Stream>>::shared_from_this;
  std::shared_ptr<Impl> server;
  std::shared_ptr<ssl::context> tls;  // kept alive for this connection (TLS sessions only)
  Stream stream;
  beast::flat_buffer buffer;
  std::optional<http::request_parser<http::string_body>> parser;
  std::shared_ptr<http::response<http::string_body>> response;
  // A streamed answer: its header, serializer, the body's source and the piece being sent.
  std::shared_ptr<http::response<http::empty_body>> stream_head;
  std::shared_ptr<http::response_serializer<http::empty_body>> stream_serializer;
  std::shared_ptr<BodyStream> body_stream;
  std::string piece;
  bool stream_chunked = true;
  int version = 11;
  std::list<std::weak_ptr<SessionBase>>::iterator registration;
  bool first = true;
  bool busy = false;  // a request is being handled or answered
  bool keep_alive = false;

  Session(std::shared_ptr<Impl> s, tcp::socket socket)
      : server(std::move(s)), stream(std::move(socket)) {
    server->counters.connections.fetch_add(1);
  }
  Session(std::shared_ptr<Impl> s, tcp::socket socket, std::shared_ptr<ssl::context> ctx)
      : server(std::move(s)), tls(std::move(ctx)), stream(std::move(socket), *tls) {
    server->counters.connections.fetch_add(1);
  }

  void CloseIfIdle() override {
    net::post(stream.get_executor(), [self = shared_from_this()] {
      if (!self->busy) self->Close();
    });
  }

  // TLS: the handshake within header_timeout, then requests as on plain HTTP.
  void Handshake() {
    beast::get_lowest_layer(stream).expires_after(server->options.header_timeout);
    stream.async_handshake(ssl::stream_base::server,
                           [self = shared_from_this()](beast::error_code ec) {
                             if (ec) {
                               self->server->counters.tls_failed.fetch_add(1);
                               return self->Close();
                             }
                             self->Read();
                           });
  }
  ~Session() {
    if (body_stream) body_stream->Cancel();  // a producer still writing stops
    {
      std::lock_guard lock(server->sessions_mu);
      server->sessions.erase(registration);
    }
    server->counters.connections.fetch_sub(1);
    if (server->stopping) server->MaybeFinish();
  }

  void Read() {
    if (server->stopping) return Close();
    parser.emplace();
    parser->body_limit(server->options.max_body_bytes);
    parser->header_limit(64 * 1024);
    beast::get_lowest_layer(stream).expires_after(first ? server->options.header_timeout
                                                        : server->options.idle_timeout);
    first = false;
    http::async_read_header(stream, buffer, *parser,
                            beast::bind_front_handler(&Session::OnHeader, shared_from_this()));
  }

  // Once a request's header is in, the request is in flight: a shutdown lets it finish.
  // "Expect: 100-continue" is answered before the body is read.
  void OnHeader(beast::error_code ec, std::size_t n) {
    if (ec) return OnRead(ec, n);
    busy = true;
    if (beast::iequals(parser->get()[http::field::expect], "100-continue")) {
      static const std::string kContinue = "HTTP/1.1 100 Continue\r\n\r\n";
      net::async_write(stream, net::buffer(kContinue),
                       [self = shared_from_this()](beast::error_code wec, std::size_t) {
                         if (wec) return self->Close();
                         self->ReadBody();
                       });
      return;
    }
    ReadBody();
  }

  void ReadBody() {
    http::async_read(stream, buffer, *parser,
                     beast::bind_front_handler(&Session::OnRead, shared_from_this()));
  }

  void OnRead(beast::error_code ec, std::size_t) {
    if (ec) busy = false;
    if (ec == http::error::end_of_stream || ec == net::error::operation_aborted) return Close();
    if (ec == beast::error::timeout) {
      server->counters.timeouts.fetch_add(1);
      return Close();
    }
    if (ec == http::error::body_limit) {
      server->counters.body_too_large.fetch_add(1);
      keep_alive = false;
      return Write(Error(413, "the body is larger than max_body_bytes (" +
                                  std::to_string(server->options.max_body_bytes) + ")"));
    }
    if (ec) {
      if (ec.category() == http::make_error_code(http::error::bad_target).category()) {
        server->counters.malformed.fetch_add(1);
        keep_alive = false;
        return Write(Error(400, "malformed HTTP request: " + ec.message()));
      }
      return Close();
    }
    server->counters.requests.fetch_add(1);
    busy = true;
    http::request<http::string_body> req = parser->release();
    keep_alive = req.keep_alive();
    version = static_cast<int>(req.version());
    HttpRequest r;
    r.method = std::string(req.method_string());
    r.version = version;
    r.target = std::string(req.target());
    r.content_type = std::string(req[http::field::content_type]);
    r.authorization = std::string(req[http::field::authorization]);
    r.if_none_match = std::string(req[http::field::if_none_match]).substr(0, 256);
    r.body = std::move(req.body());
    auto self = shared_from_this();
    server->handler(std::move(r), [self](HttpResponse out) {
      net::post(self->stream.get_executor(),
                [self, out = std::move(out)]() mutable { self->Write(std::move(out)); });
    });
  }

  static HttpResponse Error(int status, const std::string& message) {
    HttpResponse r;
    r.status = status;
    std::string escaped;
    for (char c : message) {
      if (c == '"' || c == '\\') escaped += '\\';
      escaped += c;
    }
    r.body = "{\"error\":\"" + escaped + "\"}\n";
    return r;
  }

  void Write(HttpResponse out) {
    busy = true;
    if (out.stream) return WriteStream(std::move(out));
    response = std::make_shared<http::response<http::string_body>>();
    response->version(11);
    response->result(static_cast<unsigned>(out.status));
    response->set(http::field::server, "forewarden");
    response->set(http::field::content_type, out.content_type);
    // Every answer: the browser must not guess another type than the one sent.
    response->set("X-Content-Type-Options", "nosniff");
    for (auto& [name, value] : out.headers) response->set(name, value);
    response->body() = std::move(out.body);
    if (server->stopping) keep_alive = false;
    response->keep_alive(keep_alive);
    response->prepare_payload();
    beast::get_lowest_layer(stream).expires_after(server->options.idle_timeout);
    http::async_write(stream, *response,
                      beast::bind_front_handler(&Session::OnWrite, shared_from_this()));
  }

  // A streamed body: the header now, then each piece as the producer makes it; chunked on
  // HTTP/1.1, the connection's end marks the body's end on HTTP/1.0.
  void WriteStream(HttpResponse out) {
    body_stream = std::move(out.stream);
    stream_chunked = version >= 11;
    stream_head = std::make_shared<http::response<http::empty_body>>();
    stream_head->version(stream_chunked ? 11 : 10);
    stream_head->result(static_cast<unsigned>(out.status));
    stream_head->set(http::field::server, "forewarden");
    stream_head->set(http::field::content_type, out.content_type);
    stream_head->set("X-Content-Type-Options", "nosniff");
    for (auto& [name, value] : out.headers) stream_head->set(name, value);
    if (server->stopping || !stream_chunked) keep_alive = false;
    stream_head->keep_alive(keep_alive);
    if (stream_chunked) stream_head->chunked(true);
    stream_serializer = std::make_shared<http::response_serializer<http::empty_body>>(*stream_head);
    beast::get_lowest_layer(stream).expires_after(server->options.idle_timeout);
    http::async_write_header(stream, *stream_serializer,
                             [self = shared_from_this()](beast::error_code ec, std::size_t) {
                               if (ec) return self->StreamFailed();
                               self->NextPiece();
                             });
  }

  void NextPiece() {
    auto self = shared_from_this();
    const BodyStream::Take take = body_stream->Next(
        piece, [self] { net::post(self->stream.get_executor(), [self] { self->NextPiece(); }); });
    auto after = [self](beast::error_code ec, std::size_t) {
      if (ec) return self->StreamFailed();
      self->NextPiece();
    };
    beast::get_lowest_layer(stream).expires_after(server->options.idle_timeout);
    switch (take) {
      case BodyStream::Take::kWait:
        return;
      case BodyStream::Take::kData:
        if (stream_chunked)
          return net::async_write(stream, http::make_chunk(net::buffer(piece)), after);
        return net::async_write(stream, net::buffer(piece), after);
      case BodyStream::Take::kEnd:
        if (!stream_chunked) return StreamDone(beast::error_code{}, 0);
        return net::async_write(stream, http::make_chunk_last(),
                                beast::bind_front_handler(&Session::StreamDone, self));
      case BodyStream::Take::kFailed:
        return StreamFailed();
    }
  }

  void StreamDone(beast::error_code ec, std::size_t n) {
    body_stream.reset();
    stream_serializer.reset();
    stream_head.reset();
    piece.clear();
    OnWrite(ec, n);
  }

  // The client went away, a write timed out, or the producer failed: the body stays incomplete.
  void StreamFailed() {
    if (body_stream) body_stream->Cancel();
    busy = false;
    Close();
  }

  void OnWrite(beast::error_code ec, std::size_t) {
    busy = false;
    response.reset();
    if (ec || !keep_alive) return Close();
    Read();
  }

  void Close() {
    beast::error_code ignored;
    auto& socket = beast::get_lowest_layer(stream).socket();
    socket.shutdown(tcp::socket::shutdown_both, ignored);
    socket.close(ignored);
  }
};

void HttpServer::Impl::Accept() {
  acceptor.async_accept(
      net::make_strand(ioc), [self = shared_from_this()](beast::error_code ec, tcp::socket socket) {
        if (ec || self->stopping) return;  // closed
        if (static_cast<std::size_t>(self->counters.connections.load()) >=
            self->options.max_connections) {
          self->counters.too_many_connections.fetch_add(1);
          // (the length is computed: a hand-written 46 for this 45-byte body once cut clients'
          // reads)
          static const std::string kBody = "{\"error\":\"too many connections; retry later\"}\n";
          static const std::string kBusy =
              "HTTP/1.1 503 Service Unavailable\r\nContent-Type: application/json\r\n"
              "Retry-After: 1\r\nConnection: close\r\nContent-Length: " +
              std::to_string(kBody.size()) + "\r\n\r\n" + kBody;
          beast::error_code ignored;
          net::write(socket, net::buffer(kBusy), ignored);
          socket.shutdown(tcp::socket::shutdown_both, ignored);
        } else {
          std::shared_ptr<ssl::context> context;
          {
            std::lock_guard lock(self->tls_mu);
            context = self->tls;
          }
          auto add = [&](auto session) {
            std::lock_guard lock(self->sessions_mu);
            self->sessions.push_front(session);
            session->registration = self->sessions.begin();
          };
          if (context) {
            auto session = std::make_shared<Session<beast::ssl_stream<beast::tcp_stream>>>(
                self, std::move(socket), std::move(context));
            add(session);
            net::dispatch(session->stream.get_executor(), [session] { session->Handshake(); });
          } else {
            auto session = std::make_shared<Session<beast::tcp_stream>>(self, std::move(socket));
            add(session);
            net::dispatch(session->stream.get_executor(), [session] { session->Read(); });
          }
        }
        self->Accept();
      });
}

void HttpServer::Impl::CloseIdle() {
  std::lock_guard lock(sessions_mu);
  for (auto& weak : sessions)
    if (auto s = weak.lock()) s->CloseIfIdle();
}

namespace {

Result<std::shared_ptr<ssl::context>> LoadTls(const std::string& cert_file,
                                              const std::string& key_file) {
  auto ctx = std::make_shared<ssl::context>(ssl::context::tls_server);
  beast::error_code ec;
  ctx->set_options(ssl::context::default_workarounds | ssl::context::no_sslv2 |
                       ssl::context::no_sslv3 | ssl::context::no_tlsv1 | ssl::context::no_tlsv1_1,
                   ec);
  if (!ec) ctx->use_certificate_chain_file(cert_file, ec);
  if (ec) return Status::Invalid("server.tls_cert_file " + cert_file + ": " + ec.message());
  ctx->use_private_key_file(key_file, ssl::context::pem, ec);
  if (ec)
    return Status::Invalid("server.tls_key_file " + key_file + ": " + ec.message() +
                           " (the key must be the PEM key of " + cert_file + ")");
  if (SSL_CTX_check_private_key(ctx->native_handle()) != 1)
    return Status::Invalid("server.tls_key_file " + key_file +
                           " does not belong to the certificate in " + cert_file);
  return ctx;
}

}  // namespace

Status HttpServer::CheckTls(const std::string& cert_file, const std::string& key_file) {
  Result<std::shared_ptr<ssl::context>> ctx = LoadTls(cert_file, key_file);
  return ctx ? Status::Ok() : ctx.status();
}

Status HttpServer::UseTls(const std::string& cert_file, const std::string& key_file) {
  Result<std::shared_ptr<ssl::context>> ctx = LoadTls(cert_file, key_file);
  if (!ctx) return ctx.status();
  std::lock_guard lock(impl_->tls_mu);
  impl_->tls = std::move(*ctx);
  return Status::Ok();
}

void HttpServer::Impl::MaybeFinish() {
  if (counters.connections.load() == 0)
    net::post(ioc, [self = shared_from_this()] { self->ioc.stop(); });
}

HttpServer::HttpServer(HttpOptions options, Handler handler)
    : impl_(std::make_shared<Impl>(std::move(options), std::move(handler))) {}

HttpServer::~HttpServer() = default;

Status HttpServer::Start() {
  beast::error_code ec;
  const auto address = net::ip::make_address(impl_->options.host, ec);
  if (ec) return Status::Invalid("listen address '" + impl_->options.host + "': " + ec.message());
  const tcp::endpoint endpoint(address, impl_->options.port);
  impl_->acceptor.open(endpoint.protocol(), ec);
  if (!ec) impl_->acceptor.set_option(net::socket_base::reuse_address(true), ec);
  if (!ec) impl_->acceptor.bind(endpoint, ec);
  if (!ec) impl_->acceptor.listen(net::socket_base::max_listen_connections, ec);
  if (ec)
    return Status::Io("listen on " + impl_->options.host + ":" +
                      std::to_string(impl_->options.port) + ": " + ec.message());
  impl_->Accept();
  return Status::Ok();
}

std::uint16_t HttpServer::port() const {
  return impl_->acceptor.local_endpoint().port();
}

void HttpServer::OnSignals(std::function<void(int)> on_signal) {
  impl_->on_signal = std::move(on_signal);
  impl_->signals.add(SIGINT);
  impl_->signals.add(SIGTERM);
  impl_->signals.add(SIGHUP);
  struct Waiter {
    std::shared_ptr<Impl> impl;
    void operator()(beast::error_code ec, int signo) const {
      if (ec) return;
      impl->on_signal(signo);
      impl->signals.async_wait(*this);
    }
  };
  impl_->signals.async_wait(Waiter{impl_});
}

void HttpServer::Run() {
  impl_->ioc.run();
}

void HttpServer::Shutdown(std::chrono::seconds grace) {
  net::post(impl_->ioc, [impl = impl_, grace] {
    if (impl->stopping.exchange(true)) return;
    beast::error_code ignored;
    impl->acceptor.close(ignored);
    impl->CloseIdle();
    impl->grace_timer.expires_after(grace);
    impl->grace_timer.async_wait([impl](beast::error_code ec) {
      if (!ec) impl->ioc.stop();
    });
    impl->MaybeFinish();
  });
}

const HttpCounters& HttpServer::counters() const {
  return impl_->counters;
}

}  // namespace forewarden
