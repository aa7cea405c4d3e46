// The errors gridlu throws. Each carries a kind; only the command line maps kinds to
// process exit codes.
#pragma once

#include <stdexcept>
#include <string>

namespace gridlu {

enum class error_kind : int {
  internal,   // a bug or an unexpected library failure
  usage,      // options that cannot work together, or a request refused before any work
  input,      // missing, damaged or unsuitable input data (files, datasets, checkpoints)
  output,     // an output or a resource failed: disk full, not writable, out of memory, busy
  numerical,  // no usable solution: A exactly singular, or X not finite
  stopped,    // stopped early on request, with the state saved
};

class error : public std::runtime_error {
public:
  error(error_kind kind, const std::string& what) : std::runtime_error(what), kind_(kind) {}
  error_kind kind() const { return kind_; }

private:
  error_kind kind_;
};

// A failure the other ranks cannot hear of: they may be waiting inside a collective this
// rank has left. Nothing catches it, so std::terminate runs before any destructor could
// enter a collective, and the command's terminate handler ends the whole job. Never
// thrown inside comm::together (that would agree on it while the others wait elsewhere).
class lone_failure : public std::exception {
public:
  lone_failure(error_kind kind, const std::string& what) : what_(what), kind_(kind) {}
  const char* what() const noexcept override { return what_.c_str(); }
  error_kind kind() const { return kind_; }

private:
  std::string what_;
  error_kind kind_;
};

}  // namespace gridlu
