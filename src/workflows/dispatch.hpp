// Helpers the generating workflows share: the element type named on the command line,
// and how a refusal names what a command was asked to hold.
#pragma once

#include <string>

#include "gridlu/error.hpp"
#include "gridlu/grid.hpp"
#include "gridlu/scalar.hpp"

namespace gridlu::workflows {

// Calls f with a value of the element type named `type`, or refuses the name.
template <class F>
void with_type(const std::string& type, F&& f) {
  if (!dispatch_scalar(type, f))
    throw error(error_kind::usage,
                "unknown element type '" + type + "' (float32, float64, complex64 or complex128)");
}

template <class R, class F>
R by_type(const std::string& type, F&& f) {
  R result;
  with_type(type, [&](auto zero) { result = f(zero); });
  return result;
}

// Bytes of one entry of the element type named `type`, or a refusal of the name.
inline double element_bytes(const std::string& type) {
  return by_type<double>(type, [](auto zero) { return double(sizeof zero); });
}

// What the one-line refusal names: "a float64 system of order 3000 (gridlu demo, grid 1x2)".
inline std::string described(const std::string& thing, const std::string& type, index_t n,
                             const process_grid& grid, const std::string& command) {
  return "a " + type + " " + thing + " of order " + std::to_string(n) + " (gridlu " + command +
         ", grid " + std::to_string(grid.prows()) + "x" + std::to_string(grid.pcols()) + ")";
}

}  // namespace gridlu::workflows
