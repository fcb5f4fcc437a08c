#!/bin/sh
# End-to-end benchmark of `tankfit check` (import, segmentation, fit, spectrum, the
# simulated design-expected values, checks, record and report) against the peer
# pandas/numpy/scipy script on the 10^7-sample capture of
# /work/shared/bench/gen_capture.py, CSV and WAV twin. The two are run alternately;
# medians of wall time, their ratio and the peak RSS are printed with the load
# average (the machine may be shared). Not run by ctest.
# Usage: sh tests/bench/bench_check.sh [RUNS] [N]
set -eu
top=$(cd "$(dirname "$0")/../.." && pwd)
runs=${1:-3}
n=${2:-10000000}
build=${TF_BENCH_BUILD:-$top/build/check-release}
bench=/work/shared/bench
py=/usr/bin/python3
[ -f "$bench/gen_capture.py" ] || { echo "no $bench/gen_capture.py" >&2; exit 66; }
cmake -S "$top" -B "$build" -DCMAKE_BUILD_TYPE=Release -DTF_TESTS=OFF >/dev/null
cmake --build "$build" -j 2 --target tankfit_cli >/dev/null
cli=$build/tankfit
work=$(mktemp -d /tmp/tankfit-bench-check-XXXXXX)
trap 'rm -rf "$work"' EXIT
csv=/tmp/tankfit-bench-check-$n.csv
wav=/tmp/tankfit-bench-check-$n.wav
[ -f "$csv" ] || "$py" "$bench/gen_capture.py" "$n" "$csv" >/dev/null
[ -f "$wav" ] || "$py" "$bench/gen_capture.py" --wav "$n" "$wav" >/dev/null
# full-scale values of the WAV twin (gen_capture.py: 500 V, 100 A, 500 V)
printf 'v_out V 500\ni_load A 100\nv_cap V 500\n' > "$wav.tfscale"
# The generator's circuit (invented values): half-bridge, +-200 V, 8 kHz firing,
# L 36 uH, C 1.8 uF, R 0.45 ohm; t_q of 15 us is this script's own choice.
cat > "$work/bench.ini" <<'EOF'
[inverter]
topology = half-bridge
dc_link = 400 V
firing_frequency = 8 kHz
[tank]
capacitance = 1.8 uF
inductance = 36 uH
resistance = 0.45 ohm
[switch]
turnoff_time = 15 us
[limits]
turnoff_ratio_min = 1.3
resonance_tolerance = 5 %
q_tolerance = 15 %
resistance_tolerance = 15 %
current_thd_max = 300 %
peak_current_max = 200 A
capacitor_voltage_max = 900 V
mode = non-overlapping
[record]
unit_serial = BENCH-1
[capture]
sample_rate = 10 MS/s
duration = 2 ms
EOF
# column names: the CSV header gives the unit as a suffix, the WAV sidecar plain names
csvroles="--current i_load_A --voltage v_out_V --cap-voltage v_cap_V"
wavroles="--current i_load --voltage v_out --cap-voltage v_cap"
echo "load average before: $(cut -d' ' -f1-3 /proc/loadavg) on $(nproc) cores"
echo "capture: $n samples x 3 channels; CSV $(du -m "$csv" | cut -f1) MB, WAV $(du -m "$wav" | cut -f1) MB"
timed() { # label, command...: appends "label wall rss_kb" to $work/times
  label=$1
  shift
  /usr/bin/time -o "$work/t" -f '%e %M' "$@" >/dev/null 2>"$work/err" || {
    rc=$?
    # exit 1 or 2 of tankfit check is a verdict, not a failure
    if [ "$label" != "${label#tankfit}" ] && [ $rc -le 2 ]; then :; else
      echo "$label failed ($rc):" >&2; cat "$work/err" >&2; exit 1
    fi
  }
  # /usr/bin/time puts "Command exited with non-zero status" first for a verdict exit
  read -r wall rss <<EOT
$(tail -n 1 "$work/t")
EOT
  echo "$label $wall $rss" >> "$work/times"
  echo "  $label: $wall s, peak RSS $((rss / 1024)) MB"
}
i=0
while [ "$i" -lt "$runs" ]; do
  echo "run $((i + 1)) of $runs"
  mkdir -p "$work/out"
  timed tankfit-csv "$cli" check "$csv" --design "$work/bench.ini" --out "$work/out" $csvroles
  timed peer-csv "$py" "$bench/peer_pipeline.py" "$csv"
  timed tankfit-wav "$cli" check "$wav" --design "$work/bench.ini" --out "$work/out" $wavroles
  timed peer-wav "$py" "$bench/peer_pipeline.py" "$wav"
  i=$((i + 1))
done
"$cli" check "$csv" --design "$work/bench.ini" --out "$work/out" $csvroles | grep -E 'Overall|^  [a-z-]+ ' | head -16 || true
echo "load average after: $(cut -d' ' -f1-3 /proc/loadavg)"
payload=$((n * 3 * 4 / 1024 / 1024))
awk -v payload="$payload" '
  { w[$1] = w[$1] " " $2; m[$1] = ($3 > m[$1] ? $3 : m[$1]) }
  function median(s,   a, k, j, t, c) {
    c = split(s, a, " ");
    for (k = 1; k <= c; k++) for (j = k + 1; j <= c; j++) if (a[j] < a[k]) { t = a[k]; a[k] = a[j]; a[j] = t }
    return c % 2 ? a[(c + 1) / 2] : (a[c / 2] + a[c / 2 + 1]) / 2 }
  END {
    for (f in w) md[f] = median(w[f]);
    printf "\n| input | tankfit check (median) | peer script (median) | ratio | tankfit peak RSS | peer peak RSS |\n";
    printf "|---|---|---|---|---|---|\n";
    split("csv wav", fs, " ");
    for (k = 1; k <= 2; k++) { f = fs[k];
      printf "| %s | %.2f s | %.2f s | %.1fx | %.0f MB | %.0f MB |\n", f, md["tankfit-" f], md["peer-" f],
             md["peer-" f] / md["tankfit-" f], m["tankfit-" f] / 1024, m["peer-" f] / 1024 }
    printf "\nmemory bound (issue 7): 1.5 x %d MB float32 payload + 64 MB = %.0f MB\n", payload, 1.5 * payload + 64
  }' "$work/times"
