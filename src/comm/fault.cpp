#include "comm/fault.hpp"

#include <cstdlib>
#include <string>
#include <vector>

#include "gridlu/grid.hpp"

namespace gridlu::fault {
namespace {

// The points GRIDLU_FAULT names for this rank, read once.
std::vector<std::string> points_of_this_rank() {
  std::vector<std::string> mine;
  const char* value = std::getenv("GRIDLU_FAULT");
  if (!value) return mine;
  const std::string me = std::to_string(comm::world_rank());
  std::string_view rest(value);
  while (!rest.empty()) {
    const auto comma = rest.find(',');
    const std::string_view item = rest.substr(0, comma);
    rest = comma == std::string_view::npos ? std::string_view() : rest.substr(comma + 1);
    const auto at = item.rfind('@');
    if (at != std::string_view::npos && item.substr(at + 1) == me)
      mine.emplace_back(item.substr(0, at));
  }
  return mine;
}

}  // namespace

bool hit(std::string_view point) {
  static const std::vector<std::string> mine = points_of_this_rank();
  for (const auto& p : mine)
    if (p == point) return true;
  return false;
}

}  // namespace gridlu::fault
