#!/bin/sh
# Installs what is missing, configures and builds gridlu (Release) in ./build.
# Safe to run again: each step only does what is not done yet. Extra arguments go to
# the CMake configure step (e.g. -DGRIDLU_MARCH=native).
set -eu
cd "$(dirname "$0")/.."
sh tools/install-deps.sh
cmake -S . -B build -DCMAKE_BUILD_TYPE=Release "$@" >/dev/null
cmake --build build -j"$(nproc)"
