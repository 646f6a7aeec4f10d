#!/usr/bin/env bash
# Builds the fuzz harnesses (fuzz_blob, fuzz_options, fuzz_weights, fuzz_sql)
# and make_corpus with clang++, libFuzzer, ASan and UBSan.
#   tests/fuzz/build.sh [build dir]      default: build/fuzz in the repository
# CXX picks the compiler (default: clang++, else clang++-14).
set -euo pipefail
here=$(cd "$(dirname "$0")" && pwd)
root=$(cd "$here/../.." && pwd)
out=${1:-$root/build/fuzz}
cxx=${CXX:-}
if [ -z "$cxx" ]; then
  for c in clang++ clang++-14; do
    if command -v "$c" >/dev/null; then cxx=$(command -v "$c"); break; fi
  done
fi
if [ -z "$cxx" ]; then
  echo "build.sh: clang++ not found (Debian: apt-get install clang-14 libclang-rt-14-dev)" >&2
  exit 1
fi
# One build at a time per directory (ctest of the release and the sanitize
# presets share it).
mkdir -p "$out"
exec 9>"$out/.build.lock"
flock -w 3600 9 || { echo "build.sh: $out is locked by another build" >&2; exit 1; }
# GROUPFIT_ROOT: the sources to fuzz (default: this repository).
cmake -S "$here" -B "$out" -DCMAKE_CXX_COMPILER="$cxx" -DGROUPFIT_ROOT="${GROUPFIT_ROOT:-$root}" >/dev/null
cmake --build "$out" -j "${JOBS:-2}"
