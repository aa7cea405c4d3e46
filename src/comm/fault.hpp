// Fault injection for tests: GRIDLU_FAULT="POINT@RANK[,POINT@RANK...]" makes fault::hit(POINT)
// true on world rank RANK, so that a test can fail one rank at a chosen spot (an input it
// cannot see, an allocation, a write, a read, a collective close) and check that the job
// ends instead of hanging. Without the variable every hit is false.
#pragma once

#include <string_view>

namespace gridlu::fault {

bool hit(std::string_view point);

}  // namespace gridlu::fault
