// What every entry point of the C interface shares: exceptions become status codes, and
// the message of the last failure waits for gridlu_last_error().
#pragma once

#include <exception>
#include <new>
#include <string>

#include "gridlu/error.hpp"
#include "gridlu/gridlu.h"

namespace gridlu::capi {

std::string& last_error();  // this thread's

inline int status_of(error_kind kind) {
  switch (kind) {
    case error_kind::usage:
      return GRIDLU_ERROR_USAGE;
    case error_kind::input:
      return GRIDLU_ERROR_INPUT;
    case error_kind::numerical:
      return GRIDLU_ERROR_NUMERICAL;
    case error_kind::stopped:
      return GRIDLU_ERROR_STOPPED;
    case error_kind::output:
      return GRIDLU_ERROR_RESOURCE;
    case error_kind::internal:
      break;
  }
  return GRIDLU_ERROR_INTERNAL;
}

inline int failed(int status, const char* message) {
  last_error() = message;
  return status;
}

// Runs body and says how it went. A lone_failure ends the process here, as it would in
// the command: the other ranks may be waiting in a collective this rank has left.
template <class F>
int guarded(F&& body) noexcept {
  try {
    body();
    last_error().clear();
    return GRIDLU_OK;
  } catch (const error& e) {
    return failed(status_of(e.kind()), e.what());
  } catch (const std::bad_alloc&) {
    return failed(GRIDLU_ERROR_RESOURCE, "out of memory");
  } catch (const lone_failure&) {
    std::terminate();
  } catch (const std::exception& e) {
    return failed(GRIDLU_ERROR_INTERNAL, e.what());
  } catch (...) {
    return failed(GRIDLU_ERROR_INTERNAL, "unknown failure");
  }
}

// A usage error naming the arguments unless all are given.
inline void require(bool given, const char* names) {
  if (!given) throw error(error_kind::usage, std::string(names) + " must not be NULL");
}

}  // namespace gridlu::capi
