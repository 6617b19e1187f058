// The command-line tool's subcommands behind a thin main (main stays thin so tests call the
// commands). Each returns the process exit code: 0 success, 1 I/O or runtime failure, 2 bad input
// or usage, and writes messages to the given streams.
#pragma once

#include <iosfwd>
#include <string>
#include <vector>

namespace forewarden {

int RunCommand(const std::vector<std::string>& args, std::ostream& out, std::ostream& err);

}  // namespace forewarden
