// Log lines of the service: one line per event, key=value, on standard error (journald keeps
// it). For example
//   ts=2026-12-02T01:42:34Z level=info msg="alert" event=42 kind=opened summary="opened shift ..."
// Values with spaces, quotes or '=' are quoted with \" and \n escaped, so a line never breaks.
// Secrets (tokens, webhook secrets) are never passed to these functions.
#pragma once

#include <cstring>
#include <ostream>
#include <string>
#include <utility>
#include <vector>

namespace forewarden {

using LogFields = std::vector<std::pair<std::string, std::string>>;

// The formatted line, ending in '\n'. `level`: info, warn or error.
std::string LogLine(const char* level, const std::string& msg, const LogFields& fields = {});

// The level word of a syslog severity (0-7), as librdkafka reports its log lines.
inline const char* SyslogLevel(int severity) {
  return severity <= 3 ? "error" : severity == 4 ? "warn" : severity <= 6 ? "info" : "debug";
}

// Whether a librdkafka log line only says that a property of kafka.properties (shared by the
// consumer and the producers) does not apply to this client: not worth logging.
inline bool KafkaPropertyScopeNote(const char* line) {
  return std::strstr(line, "is a consumer property") || std::strstr(line, "is a producer property");
}

// Writes a whole line at once (lines from several threads never mix).
void WriteLog(std::ostream& out, const std::string& line);

}  // namespace forewarden
