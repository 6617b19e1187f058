#include "daemon/common/log.h"

#include <ctime>
#include <mutex>

namespace forewarden {
namespace {

std::mutex log_mu;

void Value(std::string& out, const std::string& v) {
  const bool quote = v.empty() || v.find_first_of(" \"=\n\\") != std::string::npos;
  if (!quote) {
    out += v;
    return;
  }
  out += '"';
  for (char c : v) {
    if (c == '"' || c == '\\') out += '\\';
    if (c == '\n') {
      out += "\\n";
      continue;
    }
    out += c;
  }
  out += '"';
}

}  // namespace

std::string LogLine(const char* level, const std::string& msg, const LogFields& fields) {
  const std::time_t now = std::time(nullptr);
  std::tm tm{};
  gmtime_r(&now, &tm);
  char stamp[32];
  std::strftime(stamp, sizeof stamp, "%Y-%m-%dT%H:%M:%SZ", &tm);
  std::string line = std::string("ts=") + stamp + " level=" + level + " msg=";
  Value(line, msg);
  for (const auto& [k, v] : fields) {
    line += ' ';
    line += k;
    line += '=';
    Value(line, v);
  }
  line += '\n';
  return line;
}

void WriteLog(std::ostream& out, const std::string& line) {
  std::lock_guard lock(log_mu);
  out.write(line.data(), static_cast<std::streamsize>(line.size()));
  out.flush();
}

}  // namespace forewarden
