// `forewarden serve --config FILE [--listen HOST:PORT] [--data DIR]`: the long-running service.
#pragma once

#include <iosfwd>
#include <string>

namespace forewarden {

struct ServeOptions {
  std::string config;
  std::string listen;  // overrides server.listen when set
  std::string data;    // overrides server.data when set
};

// Runs until SIGTERM/SIGINT; returns the exit code (0 after a graceful stop).
int RunServe(const ServeOptions& options, std::ostream& out, std::ostream& err);

// Splits "HOST:PORT" ("[::1]:8700" for IPv6); false if malformed.
bool SplitListen(const std::string& listen, std::string& host, std::uint16_t& port);
// 127.0.0.0/8, ::1 and "localhost".
bool IsLoopback(const std::string& host);

}  // namespace forewarden
