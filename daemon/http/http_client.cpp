#include "daemon/http/http_client.h"

#include <boost/asio/connect.hpp>
#include <boost/asio/ip/tcp.hpp>
#include <boost/asio/ssl.hpp>
#include <boost/beast/core.hpp>
#include <boost/beast/http.hpp>
#include <boost/beast/ssl.hpp>
#include <limits>

namespace forewarden {

namespace net = boost::asio;
namespace beast = boost::beast;
namespace http = beast::http;
namespace ssl = net::ssl;

namespace {

// One request and its answer over a connected stream of either kind.
template <typename Stream>
void Exchange(Stream& stream, const http::request<http::string_body>& req,
              std::chrono::seconds timeout, HttpResult& result) {
  beast::get_lowest_layer(stream).expires_after(timeout);
  http::write(stream, req);
  beast::flat_buffer buffer;
  http::response_parser<http::string_body> parser;
  parser.body_limit(64 << 20);
  beast::get_lowest_layer(stream).expires_after(timeout);
  http::read(stream, buffer, parser);
  auto res = parser.release();
  result.status = static_cast<int>(res.result_int());
  result.body = std::move(res.body());
  result.retry_after = std::string(res[http::field::retry_after]);
}

struct Target {
  bool secure = false;
  std::string hostport, host, port, path;
};

// Splits an http:// or https:// URL (host, optional port, path); false for any other scheme.
bool ParseUrl(const std::string& url, Target& t) {
  t.secure = url.rfind("https://", 0) == 0;
  if (!t.secure && url.rfind("http://", 0) != 0) return false;
  std::string rest = url.substr(t.secure ? 8 : 7);
  const std::size_t slash = rest.find('/');
  t.hostport = rest.substr(0, slash);
  t.path = slash == std::string::npos ? "/" : rest.substr(slash);
  t.host = t.hostport;
  t.port = t.secure ? "443" : "80";
  if (!t.hostport.empty() && t.hostport.front() == '[') {  // [IPv6]:port
    const std::size_t close = t.hostport.find(']');
    t.host = t.hostport.substr(1, close == std::string::npos ? std::string::npos : close - 1);
    if (close != std::string::npos && close + 1 < t.hostport.size() && t.hostport[close + 1] == ':')
      t.port = t.hostport.substr(close + 2);
  } else if (const std::size_t colon = t.hostport.rfind(':'); colon != std::string::npos) {
    t.host = t.hostport.substr(0, colon);
    t.port = t.hostport.substr(colon + 1);
  }
  return true;
}

// Connects to the target (TLS verified against the system store and `tls.ca_file`) and runs
// `exchange(stream)`; connection, TLS and protocol failures go to result.error.
template <typename Exchange>
void Connected(const Target& t, std::chrono::seconds timeout, const TlsClientOptions& tls,
               HttpResult& result, Exchange&& exchange) {
  try {
    net::io_context ioc;
    net::ip::tcp::resolver resolver(ioc);
    if (!t.secure) {
      beast::tcp_stream stream(ioc);
      stream.expires_after(timeout);
      stream.connect(resolver.resolve(t.host, t.port));
      exchange(stream);
      beast::error_code ignored;
      stream.socket().shutdown(net::ip::tcp::socket::shutdown_both, ignored);
      return;
    }
    ssl::context ctx(ssl::context::tls_client);
    ctx.set_options(ssl::context::no_sslv2 | ssl::context::no_sslv3 | ssl::context::no_tlsv1 |
                    ssl::context::no_tlsv1_1);
    ctx.set_default_verify_paths();
    if (!tls.ca_file.empty()) ctx.load_verify_file(tls.ca_file);
    ctx.set_verify_mode(ssl::verify_peer);
    beast::ssl_stream<beast::tcp_stream> stream(ioc, ctx);
    stream.set_verify_callback(ssl::host_name_verification(t.host));
    if (!SSL_set_tlsext_host_name(stream.native_handle(), t.host.c_str())) {
      result.error = "TLS: cannot set the server name " + t.host;
      return;
    }
    beast::get_lowest_layer(stream).expires_after(timeout);
    beast::get_lowest_layer(stream).connect(resolver.resolve(t.host, t.port));
    stream.handshake(ssl::stream_base::client);
    exchange(stream);
    beast::error_code ignored;
    beast::get_lowest_layer(stream).socket().shutdown(net::ip::tcp::socket::shutdown_both, ignored);
  } catch (const boost::system::system_error& e) {
    result.status = 0;
    result.error = (t.secure ? "TLS: " : "") + e.code().message();
    if (e.code().category() == net::error::get_ssl_category()) {
      char reason[256];
      ERR_error_string_n(static_cast<unsigned long>(e.code().value()), reason, sizeof reason);
      result.error = std::string("TLS: ") + reason;
    }
  }
}

}  // namespace

HttpResult HttpPost(const std::string& url, const std::string& content_type,
                    const std::string& body, const std::string& token, std::chrono::seconds timeout,
                    const HttpHeaders& headers, const TlsClientOptions& tls) {
  HttpResult result;
  Target t;
  if (!ParseUrl(url, t)) {
    result.error = "only http:// and https:// URLs are supported: " + url;
    return result;
  }
  http::request<http::string_body> req{http::verb::post, t.path, 11};
  req.set(http::field::host, t.hostport);
  req.set(http::field::user_agent, "forewarden");
  req.set(http::field::content_type, content_type);
  for (const auto& [name, value] : headers) req.set(name, value);
  if (!token.empty()) req.set(http::field::authorization, "Bearer " + token);
  req.body() = body;
  req.prepare_payload();
  Connected(t, timeout, tls, result, [&](auto& stream) { Exchange(stream, req, timeout, result); });
  return result;
}

HttpResult HttpGet(const std::string& url, const std::string& token, std::chrono::seconds timeout,
                   const BodySink& sink, const TlsClientOptions& tls) {
  HttpResult result;
  Target t;
  if (!ParseUrl(url, t)) {
    result.error = "only http:// and https:// URLs are supported: " + url;
    return result;
  }
  http::request<http::empty_body> req{http::verb::get, t.path, 11};
  req.set(http::field::host, t.hostport);
  req.set(http::field::user_agent, "forewarden");
  if (!token.empty()) req.set(http::field::authorization, "Bearer " + token);
  Connected(t, timeout, tls, result, [&](auto& stream) {
    beast::get_lowest_layer(stream).expires_after(timeout);
    http::write(stream, req);
    beast::flat_buffer buffer;
    http::response_parser<http::buffer_body> parser;
    parser.body_limit(std::numeric_limits<std::uint64_t>::max());
    beast::get_lowest_layer(stream).expires_after(timeout);
    http::read_header(stream, buffer, parser);
    result.status = static_cast<int>(parser.get().result_int());
    for (const auto& field : parser.get())
      result.headers.emplace_back(std::string(field.name_string()), std::string(field.value()));
    result.retry_after = std::string(parser.get()[http::field::retry_after]);
    const bool ok = result.status == 200;
    std::vector<char> piece(1 << 20);
    while (!parser.is_done()) {
      parser.get().body().data = piece.data();
      parser.get().body().size = piece.size();
      beast::error_code ec;
      beast::get_lowest_layer(stream).expires_after(timeout);
      http::read(stream, buffer, parser, ec);
      if (ec && ec != http::error::need_buffer) throw boost::system::system_error(ec);
      const std::size_t got = piece.size() - parser.get().body().size;
      if (ok) {
        if (got && !sink(std::string_view(piece.data(), got))) {
          result.error = "stopped";
          return;
        }
      } else if (result.body.size() < (1 << 20)) {
        result.body.append(piece.data(), got);
      }
    }
    result.complete = true;
  });
  return result;
}

}  // namespace forewarden
