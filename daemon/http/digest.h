// SHA-256 through OpenSSL, for the people file's token hashes (api/access.h).
#pragma once

#include <string>
#include <string_view>

namespace forewarden {

// The SHA-256 of `data` as 64 lower-case hex digits (what `sha256sum` prints).
std::string Sha256Hex(std::string_view data);

}  // namespace forewarden
