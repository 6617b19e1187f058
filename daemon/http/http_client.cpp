#include "daemon/http/http_client.h"

#include <boost/asio/connect.hpp>
#include <boost/asio/ip/tcp.hpp>
#include <boost/asio/ssl.hpp>
#include <boost/beast/core.hpp>
#include <boost/beast/http.hpp>
#include <boost/beast/ssl.hpp>

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

}  // namespace

HttpResult HttpPost(const std::string& url, const std::string& content_type,
                    const std::string& body, const std::string& token, std::chrono::seconds timeout,
                    const HttpHeaders& headers, const TlsClientOptions& tls) {
  HttpResult result;
  const bool secure = url.rfind("https://", 0) == 0;
  if (!secure && url.rfind("http://", 0) != 0) {
    result.error = "only http:// and https:// URLs are supported: " + url;
    return result;
  }
  std::string rest = url.substr(secure ? 8 : 7);
  const std::size_t slash = rest.find('/');
  const std::string hostport = rest.substr(0, slash);
  const std::string target = slash == std::string::npos ? "/" : rest.substr(slash);
  std::string host = hostport, port = secure ? "443" : "80";
  if (!hostport.empty() && hostport.front() == '[') {  // [IPv6]:port
    const std::size_t close = hostport.find(']');
    host = hostport.substr(1, close == std::string::npos ? std::string::npos : close - 1);
    if (close != std::string::npos && close + 1 < hostport.size() && hostport[close + 1] == ':')
      port = hostport.substr(close + 2);
  } else if (const std::size_t colon = hostport.rfind(':'); colon != std::string::npos) {
    host = hostport.substr(0, colon);
    port = hostport.substr(colon + 1);
  }
  http::request<http::string_body> req{http::verb::post, target, 11};
  req.set(http::field::host, hostport);
  req.set(http::field::user_agent, "forewarden");
  req.set(http::field::content_type, content_type);
  for (const auto& [name, value] : headers) req.set(name, value);
  if (!token.empty()) req.set(http::field::authorization, "Bearer " + token);
  req.body() = body;
  req.prepare_payload();
  try {
    net::io_context ioc;
    net::ip::tcp::resolver resolver(ioc);
    if (!secure) {
      beast::tcp_stream stream(ioc);
      stream.expires_after(timeout);
      stream.connect(resolver.resolve(host, port));
      Exchange(stream, req, timeout, result);
      beast::error_code ignored;
      stream.socket().shutdown(net::ip::tcp::socket::shutdown_both, ignored);
      return result;
    }
    ssl::context ctx(ssl::context::tls_client);
    ctx.set_options(ssl::context::no_sslv2 | ssl::context::no_sslv3 | ssl::context::no_tlsv1 |
                    ssl::context::no_tlsv1_1);
    ctx.set_default_verify_paths();
    if (!tls.ca_file.empty()) ctx.load_verify_file(tls.ca_file);
    ctx.set_verify_mode(ssl::verify_peer);
    beast::ssl_stream<beast::tcp_stream> stream(ioc, ctx);
    stream.set_verify_callback(ssl::host_name_verification(host));
    if (!SSL_set_tlsext_host_name(stream.native_handle(), host.c_str())) {
      result.error = "TLS: cannot set the server name " + host;
      return result;
    }
    beast::get_lowest_layer(stream).expires_after(timeout);
    beast::get_lowest_layer(stream).connect(resolver.resolve(host, port));
    stream.handshake(ssl::stream_base::client);
    Exchange(stream, req, timeout, result);
    beast::error_code ignored;
    beast::get_lowest_layer(stream).socket().shutdown(net::ip::tcp::socket::shutdown_both, ignored);
  } catch (const boost::system::system_error& e) {
    result.status = 0;
    result.error = (secure ? "TLS: " : "") + e.code().message();
    if (e.code().category() == net::error::get_ssl_category()) {
      char reason[256];
      ERR_error_string_n(static_cast<unsigned long>(e.code().value()), reason, sizeof reason);
      result.error = std::string("TLS: ") + reason;
    }
  }
  return result;
}

}  // namespace forewarden
