// Editing a settings file's text in place: a policy's key, or a key of one of its rules, set to
// a new value, added or removed, so that everything else in the file (comments, order, layout,
// other policies) stays byte for byte as it was. `forewarden tune` writes its recommended
// settings this way, so `diff` between the input and the recommendation shows only what changed.
#pragma once

#include <optional>
#include <string>
#include <vector>

namespace config {

struct KeyEdit {
  std::string policy;                // the policy's name
  std::string rule;                  // "": a key of the policy; else a key of this rule (by name)
  std::string key;                   // e.g. "alpha", "adaptive", "false_alert_every"
  std::optional<std::string> value;  // the new value as YAML text (one line); nullopt removes
};

// Applies every edit to `text` (a settings file that loads). On success `out` holds the edited
// text; otherwise `problem` names the edit that could not be made in place (an unknown policy
// or rule, a key that is not on a line of its own where it must be removed) and `out` is
// unchanged. Setting a key to the value it has already is a change of its text only.
bool EditSettingsText(const std::string& text, const std::vector<KeyEdit>& edits, std::string& out,
                      std::string& problem);

}  // namespace config
