// What text a series key, a label name or a label value may hold: UTF-8 without control
// characters (U+0000-U+001F and U+007F), so a key is listed, stored and sent on exactly as it
// came. The README ("How actuals are applied") documents it.
#pragma once

#include <string>
#include <string_view>

namespace forewarden {

// "" when `text` is allowed, else what is wrong with it (the byte offset of the first problem).
std::string KeyTextProblem(std::string_view text);

// Removes a UTF-8 byte-order mark at the start of a CSV text (spreadsheet exports begin with one).
inline std::string_view StripByteOrderMark(std::string_view text) {
  if (text.substr(0, 3) == "\xEF\xBB\xBF") text.remove_prefix(3);
  return text;
}

}  // namespace forewarden
