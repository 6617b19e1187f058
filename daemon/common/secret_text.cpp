#include "daemon/common/secret_text.h"

#include <cstdlib>
#include <fstream>

namespace forewarden {

Result<std::string> ReadSecretText(const std::string& file, const std::string& env,
                                   const std::string& what) {
  std::string text;
  if (!file.empty()) {
    std::ifstream in(file, std::ios::binary);
    if (!in) return Status::Invalid(what + ": cannot read " + file);
    std::getline(in, text);
  } else if (!env.empty()) {
    const char* v = std::getenv(env.c_str());
    if (!v) return Status::Invalid(what + ": the environment variable " + env + " is not set");
    text = v;
    text = text.substr(0, text.find('\n'));
  }
  while (!text.empty() &&
         (text.back() == '\r' || text.back() == '\n' || text.back() == ' ' || text.back() == '\t'))
    text.pop_back();
  return text;
}

}  // namespace forewarden
