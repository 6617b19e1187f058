#include "config/edit.h"

#include <yaml-cpp/yaml.h>

#include <algorithm>

namespace config {

namespace {

struct Op {
  std::size_t begin, end;
  std::string with;
};

bool IsSpace(char c) {
  return c == ' ' || c == '\t';
}

std::size_t LineEnd(const std::string& t, std::size_t pos) {
  const std::size_t n = t.find('\n', pos);
  return n == std::string::npos ? t.size() : n;
}

std::size_t LineStart(const std::string& t, std::size_t pos) {
  while (pos > 0 && t[pos - 1] != '\n') --pos;
  return pos;
}

// The end of a quoted scalar starting at `pos` (just past its closing quote).
std::size_t QuotedEnd(const std::string& t, std::size_t pos) {
  const char q = t[pos];
  for (std::size_t i = pos + 1; i < t.size(); ++i) {
    if (q == '"' && t[i] == '\\') {
      ++i;
    } else if (t[i] == q) {
      if (q == '\'' && i + 1 < t.size() && t[i + 1] == '\'') {
        ++i;
      } else {
        return i + 1;
      }
    }
  }
  return t.size();
}

// The end of the scalar that starts at `pos` (plain or quoted, on one line).
std::size_t ScalarEnd(const std::string& t, std::size_t pos, bool in_flow) {
  if (pos < t.size() && (t[pos] == '"' || t[pos] == '\'')) return QuotedEnd(t, pos);
  std::size_t i = pos;
  while (i < t.size() && t[i] != '\n' && t[i] != '\r') {
    if (t[i] == '#' && i > pos && IsSpace(t[i - 1])) break;
    if (in_flow && (t[i] == ',' || t[i] == '}' || t[i] == ']')) break;
    ++i;
  }
  while (i > pos && IsSpace(t[i - 1])) --i;
  return i;
}

// The end of a flow collection starting at `pos` ('{' or '['), just past its closing bracket.
std::size_t FlowEnd(const std::string& t, std::size_t pos) {
  int depth = 0;
  for (std::size_t i = pos; i < t.size(); ++i) {
    const char c = t[i];
    if (c == '"' || c == '\'') {
      i = QuotedEnd(t, i) - 1;
    } else if (c == '#' && i > 0 && IsSpace(t[i - 1])) {
      i = LineEnd(t, i) - 1;
    } else if (c == '{' || c == '[') {
      ++depth;
    } else if (c == '}' || c == ']') {
      if (--depth == 0) return i + 1;
    }
  }
  return t.size();
}

// The end of a block collection whose first entry starts at `pos`, under a key at column
// `key_col`: the end of its last line that is indented deeper than the key (or, for a
// sequence, a '-' item at the key's own column).
std::size_t BlockEnd(const std::string& t, std::size_t pos, std::size_t key_col, bool sequence) {
  std::size_t end = LineEnd(t, pos);
  std::size_t at = end;
  while (at < t.size()) {
    const std::size_t line = at + 1;
    if (line >= t.size()) break;
    const std::size_t stop = LineEnd(t, line);
    std::size_t ind = line;
    while (ind < stop && IsSpace(t[ind])) ++ind;
    at = stop;
    if (ind == stop || t[ind] == '#' || t[ind] == '\r') continue;  // blank or comment only
    const std::size_t col = ind - line;
    if (col > key_col || (sequence && col == key_col && t[ind] == '-'))
      end = stop;
    else
      break;
  }
  return end;
}

// Where the value of map entry (key, value) ends in the text.
std::size_t ValueEnd(const std::string& t, std::size_t colon, const YAML::Node& key,
                     const YAML::Node& value, bool in_flow) {
  if (value.IsNull()) {
    std::size_t i = colon + 1;
    while (i < t.size() && IsSpace(t[i])) ++i;
    if (i < t.size() && (t[i] == '~' || t[i] == 'n' || t[i] == 'N' || t[i] == '"' || t[i] == '\''))
      return ScalarEnd(t, i, in_flow);
    return colon + 1;
  }
  const std::size_t pos = static_cast<std::size_t>(value.Mark().pos);
  if (value.IsScalar()) return ScalarEnd(t, pos, in_flow);
  if (value.Style() == YAML::EmitterStyle::Flow ||
      (pos < t.size() && (t[pos] == '{' || t[pos] == '[')))
    return FlowEnd(t, pos);
  return BlockEnd(t, pos, static_cast<std::size_t>(key.Mark().column), value.IsSequence());
}

struct Entry {
  YAML::Node key, value;
  std::size_t key_pos = 0, colon = 0, end = 0;
};

bool FindEntry(const std::string& t, const YAML::Node& map, const std::string& name, Entry& e) {
  const bool in_flow = map.Style() == YAML::EmitterStyle::Flow;
  for (auto it = map.begin(); it != map.end(); ++it) {
    if (!it->first.IsScalar() || it->first.Scalar() != name) continue;
    e.key = it->first;
    e.value = it->second;
    e.key_pos = static_cast<std::size_t>(e.key.Mark().pos);
    e.colon = t.find(':', e.key_pos + (t[e.key_pos] == '"' || t[e.key_pos] == '\''
                                           ? QuotedEnd(t, e.key_pos) - e.key_pos
                                           : name.size()));
    if (e.colon == std::string::npos) return false;
    e.end = ValueEnd(t, e.colon, e.key, e.value, in_flow);
    return true;
  }
  return false;
}

YAML::Node FindNamed(const YAML::Node& list, const std::string& name) {
  if (!list.IsSequence()) return YAML::Node(YAML::NodeType::Undefined);
  for (std::size_t i = 0; i < list.size(); ++i) {
    const YAML::Node item = list[i];
    if (item.IsMap() && item["name"].IsScalar() && item["name"].Scalar() == name) return item;
  }
  return YAML::Node(YAML::NodeType::Undefined);
}

bool PlanEdit(const std::string& t, const YAML::Node& root, const KeyEdit& edit, Op& op,
              std::string& problem) {
  const YAML::Node policy = FindNamed(root["policies"], edit.policy);
  if (!policy.IsDefined()) {
    problem = "no policy named '" + edit.policy + "'";
    return false;
  }
  YAML::Node map = policy;
  std::string where = "policy '" + edit.policy + "'";
  if (!edit.rule.empty()) {
    map.reset(FindNamed(policy["rules"], edit.rule));  // reset: `=` would overwrite the policy
    where += ", rule '" + edit.rule + "'";
    if (!map.IsDefined()) {
      problem = where + ": no such rule";
      return false;
    }
  }
  const bool in_flow = map.Style() == YAML::EmitterStyle::Flow;
  Entry e;
  if (FindEntry(t, map, edit.key, e)) {
    if (edit.value) {
      op = {e.colon + 1, e.end, " " + *edit.value};
      return true;
    }
    if (in_flow) {  // "key: value" and the comma after it (or before it, for the last entry)
      std::size_t begin = e.key_pos, end = e.end;
      std::size_t after = end;
      while (after < t.size() && IsSpace(t[after])) ++after;
      if (after < t.size() && t[after] == ',') {
        end = after + 1;
        while (end < t.size() && IsSpace(t[end])) ++end;
      } else {
        std::size_t before = begin;
        while (before > 0 && IsSpace(t[before - 1])) --before;
        if (before > 0 && t[before - 1] == ',') begin = before - 1;
      }
      op = {begin, end, ""};
      return true;
    }
    const std::size_t line = LineStart(t, e.key_pos);
    for (std::size_t i = line; i < e.key_pos; ++i)
      if (!IsSpace(t[i])) {
        problem = where + ": '" + edit.key + "' shares its line with the list item; move it";
        return false;
      }
    std::size_t end = e.end;
    end = LineEnd(t, end);
    if (end < t.size()) ++end;
    op = {line, end, ""};
    return true;
  }
  if (!edit.value) return false;  // nothing to remove
  const std::string entry = edit.key + ": " + *edit.value;
  if (in_flow) {
    const std::size_t close = FlowEnd(t, static_cast<std::size_t>(map.Mark().pos)) - 1;
    std::size_t at = close;
    while (at > 0 && (IsSpace(t[at - 1]) || t[at - 1] == '\n')) --at;
    op = {at, at, ", " + entry};
    return true;
  }
  Entry name;
  if (!FindEntry(t, map, "name", name)) {
    problem = where + ": no 'name' key to place '" + edit.key + "' after";
    return false;
  }
  const std::size_t col = static_cast<std::size_t>(name.key.Mark().column);
  const std::size_t at = LineEnd(t, name.end);
  op = {at, at, "\n" + std::string(col, ' ') + entry};
  return true;
}

}  // namespace

bool EditSettingsText(const std::string& text, const std::vector<KeyEdit>& edits, std::string& out,
                      std::string& problem) {
  YAML::Node root;
  try {
    root = YAML::Load(text);
  } catch (const YAML::Exception& e) {
    problem = std::string("the settings do not parse: ") + e.what();
    return false;
  }
  std::vector<Op> ops;
  for (const KeyEdit& edit : edits) {
    Op op{0, 0, ""};
    std::string why;
    if (!PlanEdit(text, root, edit, op, why)) {
      if (why.empty()) continue;  // removing a key that is not there
      problem = why;
      return false;
    }
    ops.push_back(std::move(op));
  }
  std::sort(ops.begin(), ops.end(), [](const Op& a, const Op& b) { return a.begin > b.begin; });
  for (std::size_t i = 1; i < ops.size(); ++i)
    if (ops[i].end > ops[i - 1].begin) {
      problem = "two edits overlap in the text";
      return false;
    }
  std::string result = text;
  for (const Op& op : ops) result.replace(op.begin, op.end - op.begin, op.with);
  out = std::move(result);
  return true;
}

}  // namespace config
