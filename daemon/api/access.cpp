#include "daemon/api/access.h"

#include <fstream>
#include <sstream>

#include "daemon/common/secret_text.h"
#include "daemon/http/digest.h"

namespace forewarden {

const char* RoleName(Role r) {
  switch (r) {
    case Role::kRead:
      return "read";
    case Role::kPlanner:
      return "planner";
    case Role::kOperator:
      return "operator";
  }
  return "read";
}

namespace {

bool ConstantTimeEqual(const std::string& a, const std::string& b) {
  unsigned char diff = a.size() == b.size() ? 0 : 1;
  const std::size_t n = std::max(a.size(), b.size());
  for (std::size_t i = 0; i < n; ++i) {
    const unsigned char x = i < a.size() ? static_cast<unsigned char>(a[i]) : 0;
    const unsigned char y = i < b.size() ? static_cast<unsigned char>(b[i]) : 0;
    diff |= static_cast<unsigned char>(x ^ y);
  }
  return diff == 0;
}

bool NameChar(char c) {
  return (c >= 'a' && c <= 'z') || (c >= 'A' && c <= 'Z') || (c >= '0' && c <= '9') || c == '.' ||
         c == '_' || c == '-' || c == '@';
}

}  // namespace

Result<std::vector<std::pair<Person, std::string>>> Access::ParsePeople(const std::string& text,
                                                                        const std::string& source) {
  std::vector<std::pair<Person, std::string>> out;
  std::istringstream in(text);
  std::string line;
  long number = 0;
  auto bad = [&](const char* field, const std::string& why) {
    return Status::Invalid(source + " line " + std::to_string(number) + ", field " + field + ": " +
                           why);
  };
  while (std::getline(in, line)) {
    ++number;
    if (!line.empty() && line.back() == '\r') line.pop_back();
    const std::size_t hash = line.find('#');
    if (hash != std::string::npos) line.resize(hash);
    std::istringstream fields(line);
    std::string name, role, digest, extra;
    if (!(fields >> name)) continue;  // blank or comment
    if (!(fields >> role)) return bad("role", "missing; a line is NAME ROLE SHA256-OF-TOKEN");
    if (!(fields >> digest)) return bad("hash", "missing; a line is NAME ROLE SHA256-OF-TOKEN");
    if (fields >> extra) return bad("hash", "more than three fields on the line");
    if (name.size() > 64) return bad("name", "longer than 64 characters");
    for (char c : name)
      if (!NameChar(c)) return bad("name", "letters, digits and . _ - @ only");
    Person p{name, Role::kRead};
    if (role == "read")
      p.role = Role::kRead;
    else if (role == "planner")
      p.role = Role::kPlanner;
    else if (role == "operator")
      p.role = Role::kOperator;
    else
      return bad("role", "must be read, planner or operator, got '" + role.substr(0, 32) + "'");
    if (digest.size() != 64) return bad("hash", "must be 64 hex digits (sha256sum of the token)");
    for (char& c : digest) {
      if (c >= 'A' && c <= 'F') c = static_cast<char>(c - 'A' + 'a');
      if (!((c >= '0' && c <= '9') || (c >= 'a' && c <= 'f')))
        return bad("hash", "must be 64 hex digits (sha256sum of the token)");
    }
    for (const auto& [other, other_digest] : out) {
      if (other.name == name) return bad("name", "'" + name + "' is listed twice");
      if (other_digest == digest) return bad("hash", "the same token as " + other.name);
    }
    out.emplace_back(std::move(p), std::move(digest));
  }
  return out;
}

Result<Access> Access::Load(const config::Server& s) {
  Access a;
  Result<std::string> shared = ReadSecretText(
      s.token_file, s.token_env, s.token_file.empty() ? "server.token_env" : "server.token_file");
  if (!shared) return shared.status();
  if ((!s.token_file.empty() || !s.token_env.empty()) && shared->size() < 16)
    return Status::Invalid("the bearer token must be at least 16 characters");
  a.shared_ = std::move(*shared);
  if (!s.people_file.empty()) {
    std::ifstream in(s.people_file, std::ios::binary);
    if (!in) return Status::Io("server.people_file: cannot read " + s.people_file);
    std::ostringstream text;
    text << in.rdbuf();
    auto people = ParsePeople(text.str(), s.people_file);
    if (!people) return people.status();
    if (people->empty())
      return Status::Invalid("server.people_file: " + s.people_file + " lists nobody");
    a.people_ = std::move(*people);
  }
  a.reads_need_token_ = s.token_for_reads;
  return a;
}

const char* Access::mode() const {
  if (!people_.empty()) return "people";
  return shared_.empty() ? "open" : "shared";
}

std::optional<Person> Access::Identify(const std::string& authorization) const {
  const std::string prefix = "Bearer ";
  if (authorization.rfind(prefix, 0) != 0) return std::nullopt;
  const std::string token = authorization.substr(prefix.size());
  if (token.empty()) return std::nullopt;
  std::optional<Person> found;
  if (!shared_.empty() && ConstantTimeEqual(token, shared_)) found = Person{"", Role::kOperator};
  if (!people_.empty()) {
    const std::string digest = Sha256Hex(token);
    for (const auto& [person, want] : people_)  // every entry, found or not
      if (ConstantTimeEqual(digest, want) && !found) found = person;
  }
  return found;
}

}  // namespace forewarden
