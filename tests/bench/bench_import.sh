#!/bin/sh
# Import benchmark (not a test): a 10^7-row CSV (time + 3 channels, values like
# -1.23456e-03, ~520 MB) and its 16-bit WAV twin in /tmp, timed through
# `tankfit inspect`; prints MB/s (CSV), samples/s (WAV) and peak RSS against the
# floors of issue 2 (CSV >= 250 MB/s, WAV >= 2e8 samples/s, RSS <= 1.3 x payload
# + 32 MiB). A libcsv-only pass over the same file calibrates for machine load.
#
# Usage: tests/bench/bench_import.sh [BUILD_DIR] [ROWS]
#   BUILD_DIR: a Release build with the tankfit binary (default build/release)
#   keeps the generated files (TF_BENCH_DIR, default /tmp) for the next run.
set -eu
top=$(cd "$(dirname "$0")/../.." && pwd)
build=${1:-$top/build/release}
rows=${2:-10000000}
dir=${TF_BENCH_DIR:-/tmp}
csv=$dir/tankfit-bench-$rows.csv
wav=$dir/tankfit-bench-$rows.wav
py=/usr/bin/python3
cli=$build/tankfit
[ -x "$cli" ] || { echo "bench_import: no $cli (cmake --build $build --target tankfit_cli)" >&2; exit 66; }

if [ ! -s "$csv" ] || [ ! -s "$wav" ]; then
  echo "generating $csv and $wav ..."
  "$py" "$top/tests/bench/gen_bench_capture.py" "$rows" "$csv" "$wav"
fi

# calibration: one libcsv parser, empty callbacks
cal=$dir/tankfit-bench-csv-baseline
cc -O2 -o "$cal" "$top/tests/bench/csv_baseline.c" -lcsv

echo "machine: $(nproc) cores, load average $(cut -d' ' -f1-3 /proc/loadavg)"
"$cal" "$csv"

# run CMD..., print wall seconds, CPU seconds and peak RSS (MiB) of the child
measure() {
  "$py" - "$@" <<'PY'
import resource, subprocess, sys, time
t = time.monotonic()
r = subprocess.run(sys.argv[1:], stdout=subprocess.DEVNULL)
wall = time.monotonic() - t
u = resource.getrusage(resource.RUSAGE_CHILDREN)
print("%.3f %.3f %.1f %d" % (wall, u.ru_utime + u.ru_stime, u.ru_maxrss / 1024.0, r.returncode))
PY
}

report() { # name bytes samples channels wall cpu rss
  "$py" - "$@" <<'PY'
import sys
name, size, n, ch, wall, cpu, rss = sys.argv[1], int(sys.argv[2]), int(sys.argv[3]), int(sys.argv[4]), float(sys.argv[5]), float(sys.argv[6]), float(sys.argv[7])
limit = (1.3 * 4 * n * ch) / 2**20 + 32
print("%-4s %8.1f MB/s  %8.3g samples/s  wall %.2f s  cpu %.2f s  peak RSS %.1f MiB (limit %.1f MiB)"
      % (name, size / 1e6 / wall, n * ch / wall, wall, cpu, rss, limit))
PY
}

for run in 1 2 3; do
  set -- $(measure "$cli" inspect "$csv")
  [ "$4" = 0 ] || { echo "inspect failed on $csv" >&2; exit 1; }
  report csv "$(stat -c %s "$csv")" "$rows" 3 "$1" "$2" "$3"
  set -- $(measure "$cli" inspect "$wav")
  [ "$4" = 0 ] || { echo "inspect failed on $wav" >&2; exit 1; }
  report wav "$(stat -c %s "$wav")" "$rows" 3 "$1" "$2" "$3"
done
