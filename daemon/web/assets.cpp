#include "daemon/web/assets.h"

#include <cstdint>
#include <cstdio>
#include <unordered_map>

namespace forewarden {

namespace web_data {
extern const EmbeddedFile kFiles[];
extern const std::size_t kFileCount;
}  // namespace web_data

namespace {

const char* ContentTypeOf(std::string_view name) {
  auto ends = [&](std::string_view s) {
    return name.size() >= s.size() && name.substr(name.size() - s.size()) == s;
  };
  if (ends(".html")) return "text/html; charset=utf-8";
  if (ends(".js")) return "text/javascript; charset=utf-8";
  if (ends(".css")) return "text/css; charset=utf-8";
  if (ends(".svg")) return "image/svg+xml";
  return "application/octet-stream";
}

std::string EtagOf(std::string_view body) {
  std::uint64_t h = 1469598103934665603ull;  // FNV-1a: a content tag, not a security measure
  for (unsigned char c : body) h = (h ^ c) * 1099511628211ull;
  char text[24];
  std::snprintf(text, sizeof text, "\"%016llx\"", static_cast<unsigned long long>(h));
  return text;
}

const std::unordered_map<std::string_view, PageFile>& Files() {
  static const auto* files = [] {
    auto* out = new std::unordered_map<std::string_view, PageFile>();
    for (std::size_t i = 0; i < web_data::kFileCount; ++i) {
      const web_data::EmbeddedFile& f = web_data::kFiles[i];
      const std::string_view body(reinterpret_cast<const char*>(f.data), f.size);
      out->emplace(f.name, PageFile{body, ContentTypeOf(f.name), EtagOf(body)});
    }
    return out;
  }();
  return *files;
}

}  // namespace

const PageFile* FindPageFile(std::string_view name) {
  const auto& files = Files();
  auto it = files.find(name);
  return it == files.end() ? nullptr : &it->second;
}

const char* PageSecurityPolicy() {
  return "default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self' data:; "
         "connect-src 'self'; font-src 'self'; base-uri 'none'; form-action 'none'; "
         "frame-ancestors 'none'";
}

}  // namespace forewarden
