// Secrets (bearer tokens, webhook keys) from a file or an environment variable, read one way
// everywhere: the first line, without trailing spaces, tabs or line ends. Never logged.
#pragma once

#include <string>

#include "daemon/common/status.h"

namespace forewarden {

// From `file` when given, else from the environment variable `env`; "" when neither is set.
// `what` names the setting in messages ("server.token_file", "sink hook").
Result<std::string> ReadSecretText(const std::string& file, const std::string& env,
                                   const std::string& what);

}  // namespace forewarden
