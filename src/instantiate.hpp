// Explicit instantiation of the library's templates for the four element types.
#pragma once

#include <complex>

#define GRIDLU_FOR_EACH_SCALAR(X) \
  X(float)                        \
  X(double)                       \
  X(std::complex<float>)          \
  X(std::complex<double>)
