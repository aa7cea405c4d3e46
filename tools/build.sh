#!/bin/sh
# Installs what is missing, configures and builds gridlu (Release) in ./build: the library
# and the gridlu command, and with --all the test suite and the benchmark helper too.
# Safe to run again: each step only does what is not done yet. Other arguments go to the
# CMake configure step (e.g. -DGRIDLU_MARCH=native).
set -eu
cd "$(dirname "$0")/.."
target="--target gridlu_cli"
if [ "${1:-}" = "--all" ]; then
  target=""
  shift
fi
sh tools/install-deps.sh
cmake -S . -B build -DCMAKE_BUILD_TYPE=Release "$@" >/dev/null
cmake --build build -j"$(nproc)" $target
