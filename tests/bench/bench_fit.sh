#!/bin/sh
# Fitter benchmarks (not run by ctest): builds the library in Release (build/fit-release),
# then (1) the Monte-Carlo accuracy table against the Cramer-Rao bound, (2) the speed of
# tf_fit_run on 16,000 bursts of ~1000 samples. Prints the machine load first: the
# machine may be shared, so the figures are noisy.
# Usage: sh tests/bench/bench_fit.sh [TRIALS] [BURSTS]
set -eu
top=$(cd "$(dirname "$0")/../.." && pwd)
build=${TF_BENCH_BUILD:-$top/build/fit-release}
cmake -S "$top" -B "$build" -DCMAKE_BUILD_TYPE=Release -DTF_TESTS=OFF >/dev/null
cmake --build "$build" -j 2 --target tankfit >/dev/null
libs="$build/libtankfit.a $(pkg-config --libs sndfile fftw3 gsl jansson inih libcrypto) -lcsv -lpthread -lm"
cc -O2 -std=c11 -D_DEFAULT_SOURCE -I"$top/include" "$top/tests/bench/bench_fit_crlb.c" \
   $libs -o "$build/bench_fit_crlb"
cc -O2 -std=c11 -D_DEFAULT_SOURCE -I"$top/include" -I"$top/tests/support" \
   "$top/tests/bench/bench_fit_speed.c" "$top/tests/support/fit_synth.c" $libs \
   -o "$build/bench_fit_speed"
echo "load: $(cut -d' ' -f1-3 /proc/loadavg) on $(nproc) cores"
"$build/bench_fit_crlb" "${1:-1000}" || true
echo
echo "load: $(cut -d' ' -f1-3 /proc/loadavg) on $(nproc) cores"
"$build/bench_fit_speed" "${2:-16000}"
