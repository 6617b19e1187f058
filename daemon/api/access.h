// Who may do what: the bearer tokens of the service and the role each one carries.
//
// Three ways to run, by the settings (server.*):
//   open      no token set: every request is allowed (loopback only; serve refuses otherwise)
//   shared    token_file / token_env: one secret, the operator role; actions record the "by" /
//             "who" the request body names
//   people    people_file: one line per person, NAME ROLE SHA256-OF-TOKEN; actions record the
//             person's name, so the audit trail cannot be typed in by hand. A shared token may
//             be set beside it and keeps working as one operator.
// Roles, each allowing what the ones before it do:
//   read      the GET endpoints, when server.token_for_reads asks for a token on reads
//   planner   work alerts (acknowledge, snooze, resolve) and reset forecasts
//   operator  everything else: send actuals, retry deliveries
// The people file is read at start and on every reload (SIGHUP); a file with a bad line is
// refused whole, naming the line and the field.
#pragma once

#include <optional>
#include <string>
#include <vector>

#include "config/settings.h"
#include "daemon/common/status.h"

namespace forewarden {

enum class Role { kRead = 0, kPlanner = 1, kOperator = 2 };
const char* RoleName(Role r);

struct Person {
  std::string name;  // "" for the shared token: the request body names who acts
  Role role = Role::kOperator;
};

class Access {
 public:
  // Reads the shared token and the people file that `server` names.
  static Result<Access> Load(const config::Server& server);
  // One shared token (the operator), as token_file would give; for embedding and tests.
  static Access Shared(std::string token) {
    Access a;
    a.shared_ = std::move(token);
    return a;
  }
  // Parses people-file text; `source` names it in errors ("FILE line N, field role: ...").
  static Result<std::vector<std::pair<Person, std::string>>> ParsePeople(const std::string& text,
                                                                         const std::string& source);

  // "open", "shared" or "people".
  const char* mode() const;
  bool open() const { return shared_.empty() && people_.empty(); }
  bool reads_need_token() const { return reads_need_token_; }
  // The person an Authorization header carries ("Bearer TOKEN"); nullopt when it names no one.
  // Compared in constant time against every entry.
  std::optional<Person> Identify(const std::string& authorization) const;
  std::size_t people() const { return people_.size(); }

 private:
  std::string shared_;                                  // the shared token, if any
  std::vector<std::pair<Person, std::string>> people_;  // person, SHA-256 hex of the token
  bool reads_need_token_ = false;
};

}  // namespace forewarden
