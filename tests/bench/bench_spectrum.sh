#!/bin/sh
# Spectrum benchmark: builds the library in Release (build/spectrum-release) and times
# tf_spectrum_run on three channels of N samples (default 10^7). Not run by ctest.
# Usage: sh tests/bench/bench_spectrum.sh [N]
set -eu
top=$(cd "$(dirname "$0")/../.." && pwd)
build=${TF_BENCH_BUILD:-$top/build/spectrum-release}
cmake -S "$top" -B "$build" -DCMAKE_BUILD_TYPE=Release -DTF_TESTS=OFF >/dev/null
cmake --build "$build" -j 2 --target tankfit >/dev/null
cc -O2 -std=c11 -D_DEFAULT_SOURCE -I"$top/include" "$top/tests/bench/bench_spectrum.c" \
   "$build/libtankfit.a" $(pkg-config --libs sndfile fftw3 gsl jansson inih libcrypto) \
   -lcsv -lpthread -lm -o "$build/bench_spectrum"
echo "load: $(cut -d' ' -f1-3 /proc/loadavg) on $(nproc) cores"
"$build/bench_spectrum" "${1:-10000000}"
