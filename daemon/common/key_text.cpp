#include "daemon/common/key_text.h"

namespace forewarden {

std::string KeyTextProblem(std::string_view text) {
  const auto* s = reinterpret_cast<const unsigned char*>(text.data());
  const std::size_t n = text.size();
  for (std::size_t i = 0; i < n;) {
    const unsigned char c = s[i];
    if (c < 0x20 || c == 0x7F)
      return "a control character (byte " + std::to_string(c) + ") at byte " + std::to_string(i) +
             "; keys and labels are UTF-8 text without control characters";
    if (c < 0x80) {
      ++i;
      continue;
    }
    // Length and the smallest code point of each form (overlong forms are invalid).
    std::size_t len = 0;
    unsigned cp = 0, min = 0;
    if ((c & 0xE0) == 0xC0)
      len = 2, cp = c & 0x1F, min = 0x80;
    else if ((c & 0xF0) == 0xE0)
      len = 3, cp = c & 0x0F, min = 0x800;
    else if ((c & 0xF8) == 0xF0)
      len = 4, cp = c & 0x07, min = 0x10000;
    bool ok = len > 0 && i + len <= n;
    for (std::size_t k = 1; ok && k < len; ++k) {
      ok = (s[i + k] & 0xC0) == 0x80;
      cp = cp << 6 | (s[i + k] & 0x3F);
    }
    if (!ok || cp < min || cp > 0x10FFFF || (cp >= 0xD800 && cp <= 0xDFFF))
      return "invalid UTF-8 at byte " + std::to_string(i) + "; keys and labels are UTF-8 text";
    i += len;
  }
  return "";
}

}  // namespace forewarden
