// Everything a program needs to factor and solve with gridlu.
#pragma once

#include "gridlu/accuracy.hpp"
#include "gridlu/bem.hpp"
#include "gridlu/checkpoint.hpp"
#include "gridlu/error.hpp"
#include "gridlu/factorization.hpp"
#include "gridlu/generate.hpp"
#include "gridlu/grid.hpp"
#include "gridlu/io.hpp"
#include "gridlu/layout.hpp"
#include "gridlu/lu.hpp"
#include "gridlu/matrix.hpp"
#include "gridlu/mixed.hpp"
#include "gridlu/scalar.hpp"
#include "gridlu/trust.hpp"
