// Everything a program needs to factor and solve with gridlu.
#pragma once

#include "gridlu/accuracy.hpp"
#include "gridlu/error.hpp"
#include "gridlu/generate.hpp"
#include "gridlu/grid.hpp"
#include "gridlu/layout.hpp"
#include "gridlu/lu.hpp"
#include "gridlu/matrix.hpp"
#include "gridlu/scalar.hpp"
