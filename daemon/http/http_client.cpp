#include "daemon/http/http_client.h"

#include <boost/asio/connect.hpp>
#include <boost/asio/ip/tcp.hpp>
#include <boost/beast/core.hpp>
#include <boost/beast/http.hpp>

namespace forewarden {

namespace net = boost::asio;
namespace beast = boost::beast;
namespace http = beast::http;

HttpResult HttpPost(const std::string& url, const std::string& content_type,
                    const std::string& body, const std::string& token, std::chrono::seconds timeout,
                    const HttpHeaders& headers) {
  HttpResult result;
  const std::string scheme = "http://";
  if (url.rfind(scheme, 0) != 0) {
    result.error = "only http:// URLs are supported: " + url;
    return result;
  }
  std::string rest = url.substr(scheme.size());
  const std::size_t slash = rest.find('/');
  const std::string hostport = rest.substr(0, slash);
  const std::string target = slash == std::string::npos ? "/" : rest.substr(slash);
  std::string host = hostport, port = "80";
  if (!hostport.empty() && hostport.front() == '[') {  // [IPv6]:port
    const std::size_t close = hostport.find(']');
    host = hostport.substr(1, close == std::string::npos ? std::string::npos : close - 1);
    if (close != std::string::npos && close + 1 < hostport.size() && hostport[close + 1] == ':')
      port = hostport.substr(close + 2);
  } else if (const std::size_t colon = hostport.rfind(':'); colon != std::string::npos) {
    host = hostport.substr(0, colon);
    port = hostport.substr(colon + 1);
  }
  try {
    net::io_context ioc;
    net::ip::tcp::resolver resolver(ioc);
    beast::tcp_stream stream(ioc);
    stream.expires_after(timeout);
    stream.connect(resolver.resolve(host, port));
    http::request<http::string_body> req{http::verb::post, target, 11};
    req.set(http::field::host, hostport);
    req.set(http::field::user_agent, "forewarden");
    req.set(http::field::content_type, content_type);
    for (const auto& [name, value] : headers) req.set(name, value);
    if (!token.empty()) req.set(http::field::authorization, "Bearer " + token);
    req.body() = body;
    req.prepare_payload();
    stream.expires_after(timeout);
    http::write(stream, req);
    beast::flat_buffer buffer;
    http::response_parser<http::string_body> parser;
    parser.body_limit(64 << 20);
    stream.expires_after(timeout);
    http::read(stream, buffer, parser);
    auto res = parser.release();
    result.status = static_cast<int>(res.result_int());
    result.body = std::move(res.body());
    result.retry_after = std::string(res[http::field::retry_after]);
    beast::error_code ignored;
    stream.socket().shutdown(net::ip::tcp::socket::shutdown_both, ignored);
  } catch (const boost::system::system_error& e) {
    result.status = 0;
    result.error = e.code().message();
  }
  return result;
}

}  // namespace forewarden
