// libFuzzer target: loading settings from arbitrary text never crashes, and either yields
// problems that name the file or policies that pass their own bounds.
#include <cstdint>
#include <cstdlib>
#include <string>

#include "config/load.h"

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  const std::string text(reinterpret_cast<const char*>(data), size);
  const config::LoadResult r = config::LoadSettingsText(text, "fuzz.yaml");
  for (const auto& p : r.problems)
    if (p.file != "fuzz.yaml" || p.message.empty()) std::abort();
  if (r.ok())
    for (const auto& p : r.settings.policies) {
      const auto& c = p.spec.constants;
      if (p.name.empty() || !(c.alpha >= 0 && c.alpha <= 1) || !(p.spec.signal_beta > 0) ||
          !(p.spec.coverage > 0 && p.spec.coverage < 1))
        std::abort();
    }
  return 0;
}
