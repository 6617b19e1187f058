// The planner page's files (daemon/web/page/ and the installed chart library), compiled into
// the binary at build time by daemon/web/embed.cmake: the service serves them from memory and
// needs no file, network or CDN at run time.
#pragma once

#include <cstddef>
#include <string>
#include <string_view>

namespace forewarden {

namespace web_data {
struct EmbeddedFile {
  const char* name;
  const unsigned char* data;
  std::size_t size;
};
}  // namespace web_data

struct PageFile {
  std::string_view body;
  const char* content_type;
  std::string etag;  // quoted, from the content
};

// The file served at /page/NAME ("index.html" for /), or nullptr.
const PageFile* FindPageFile(std::string_view name);

// The headers every page answer carries: a Content-Security-Policy with no inline script or
// style, no framing, no sniffing, no referrer.
const char* PageSecurityPolicy();

}  // namespace forewarden
