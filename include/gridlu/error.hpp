// Errors and the process exit codes they map to.
#pragma once

#include <stdexcept>
#include <string>

namespace gridlu {

// Exit codes of the `gridlu` command (documented in README.md and --help).
enum class exit_code : int {
  ok = 0,
  internal = 1,
  usage = 2,
  input = 3,
  singular = 4,
  stopped = 5,
};

class error : public std::runtime_error {
public:
  error(exit_code code, const std::string& what) : std::runtime_error(what), code_(code) {}
  exit_code code() const { return code_; }

private:
  exit_code code_;
};

}  // namespace gridlu
