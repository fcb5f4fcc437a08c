#!/bin/sh
# Simulator engine benchmark: builds the library in Release (build/synth-release) and times
# tf_synth_fill of N samples x 6 channels (default 10^7, at 10 MS/s) plus the truth, for a
# half-bridge and a full-bridge (and N/10 for a single-switch stage). Not run by ctest.
# Usage: sh tests/bench/bench_synth_engine.sh [N]
set -eu
top=$(cd "$(dirname "$0")/../.." && pwd)
build=${TF_BENCH_BUILD:-$top/build/synth-release}
cmake -S "$top" -B "$build" -DCMAKE_BUILD_TYPE=Release -DTF_TESTS=OFF >/dev/null
cmake --build "$build" -j 2 --target tankfit >/dev/null
cc -O2 -std=c11 -D_DEFAULT_SOURCE -I"$top/include" "$top/tests/bench/bench_synth_engine.c" \
   "$build/libtankfit.a" $(pkg-config --libs sndfile fftw3 gsl jansson inih libcrypto) \
   -lcsv -lpthread -lm -o "$build/bench_synth_engine"
echo "load: $(cut -d' ' -f1-3 /proc/loadavg) on $(nproc) cores"
"$build/bench_synth_engine" "${1:-10000000}"
