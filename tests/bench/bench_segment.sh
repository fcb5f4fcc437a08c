#!/bin/sh
# Segmenter benchmark: builds the library in Release (build/segment-release) and times
# tf_segment_run on an N-sample current channel (default 10^7). Not run by ctest.
# Usage: sh tests/bench/bench_segment.sh [N]
set -eu
top=$(cd "$(dirname "$0")/../.." && pwd)
build=${TF_BENCH_BUILD:-$top/build/segment-release}
cmake -S "$top" -B "$build" -DCMAKE_BUILD_TYPE=Release -DTF_TESTS=OFF >/dev/null
cmake --build "$build" -j 2 --target tankfit >/dev/null
cc -O2 -std=c11 -D_DEFAULT_SOURCE -I"$top/include" -I"$top/tests/support" \
   "$top/tests/bench/bench_segment.c" "$top/tests/support/segment_wave.c" \
   "$build/libtankfit.a" $(pkg-config --libs sndfile fftw3 gsl jansson inih libcrypto) \
   -lcsv -lpthread -lm -o "$build/bench_segment"
echo "load: $(cut -d' ' -f1-3 /proc/loadavg) on $(nproc) cores"
"$build/bench_segment" "${1:-10000000}"
