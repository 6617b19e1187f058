#include "daemon/observe/systemd_notify.h"

#include <sys/socket.h>
#include <sys/un.h>
#include <unistd.h>

#include <cstdlib>
#include <cstring>

namespace forewarden {

bool NotifyServiceManager(const std::string& state) {
  const char* path = std::getenv("NOTIFY_SOCKET");
  if (!path || !*path) return false;
  const std::size_t len = std::strlen(path);
  sockaddr_un addr{};
  if (len >= sizeof addr.sun_path || (path[0] != '/' && path[0] != '@')) return false;
  addr.sun_family = AF_UNIX;
  std::memcpy(addr.sun_path, path, len);
  if (path[0] == '@') addr.sun_path[0] = '\0';  // abstract namespace
  const int fd = socket(AF_UNIX, SOCK_DGRAM | SOCK_CLOEXEC, 0);
  if (fd < 0) return false;
  const auto size = static_cast<socklen_t>(offsetof(sockaddr_un, sun_path) + len);
  const ssize_t sent = sendto(fd, state.data(), state.size(), MSG_NOSIGNAL,
                              reinterpret_cast<const sockaddr*>(&addr), size);
  close(fd);
  return sent == static_cast<ssize_t>(state.size());
}

std::chrono::microseconds WatchdogInterval() {
  const char* usec = std::getenv("WATCHDOG_USEC");
  if (!usec || !*usec) return std::chrono::microseconds(0);
  if (const char* pid = std::getenv("WATCHDOG_PID"); pid && *pid && std::atol(pid) != getpid())
    return std::chrono::microseconds(0);
  const long long v = std::atoll(usec);
  return std::chrono::microseconds(v > 0 ? v : 0);
}

}  // namespace forewarden
