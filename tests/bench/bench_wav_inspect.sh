#!/bin/sh
# Benchmark of the WAV path: `tankfit inspect` on a 10^7-frame, 3-channel 16-bit WAV
# (made by /work/shared/bench/gen_capture.py or, without it, by SoX). Prints wall and CPU
# time, million samples per second and peak RSS per run, and the load average, since the
# machine may be shared. Not run by ctest.
# Usage: sh tests/bench/bench_wav_inspect.sh [BUILD_DIR] [RUNS]
set -eu
top=$(cd "$(dirname "$0")/../.." && pwd)
build=${1:-$top/build/release}
runs=${2:-5}
cli=$build/tankfit
wav=/tmp/tankfit-bench-wav.wav
frames=10000000
[ -x "$cli" ] || { echo "build $build first (cmake -DCMAKE_BUILD_TYPE=Release)" >&2; exit 66; }
if [ ! -f "$wav" ]; then
  gen=/work/shared/bench/gen_capture.py
  if [ -f "$gen" ]; then
    /usr/bin/python3 "$gen" "$frames" "$wav" --wav >/dev/null
  else
    sox -D -n -r 10000000 -c 3 -b 16 "$wav" synth 1 sine 8000 sine 19000 sine 3000 \
        remix 1v0.4 2v0.5 3v0.8
  fi
fi
printf 'v_out V 500\ni_load A 100\nv_cap V 500\n' > "$wav.tfscale"
echo "load average: $(cut -d' ' -f1-3 /proc/loadavg) on $(nproc) cores"
samples=$((frames * 3))
i=0
while [ $i -lt "$runs" ]; do
  /usr/bin/time -o /tmp/tankfit-bench-wav.time -f '%e %U %S %M' "$cli" inspect "$wav" >/dev/null
  read -r wall user sys rss < /tmp/tankfit-bench-wav.time
  awk -v w="$wall" -v u="$user" -v s="$sys" -v r="$rss" -v n="$samples" 'BEGIN {
    cpu = u + s; if (w <= 0) w = 0.01; if (cpu <= 0) cpu = 0.01;
    printf "wall %.2f s (%.0f M samples/s)  cpu %.2f s (%.0f M samples/s)  peak RSS %.0f MB\n",
           w, n / w / 1e6, cpu, n / cpu / 1e6, r / 1024 }'
  i=$((i + 1))
done
echo "floors (issue 2): >= 200 M samples/s; peak RSS <= $((120 * 13 / 10 + 32)) MB"
