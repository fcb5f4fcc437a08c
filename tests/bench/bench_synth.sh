#!/bin/sh
# Benchmark of `tankfit synth`: 10^7 samples x 6 channels (half-bridge, every channel
# with noise and ADC bits) written as CSV and as 16-bit WAV; prints wall seconds and
# the peak resident memory of each run. Not run by ctest.
# Usage: tests/bench/bench_synth.sh [TANKFIT] [SAMPLES]   (default build/release/tankfit, 1e7)
set -eu
top=$(cd "$(dirname "$0")/../.." && pwd)
tankfit=${1:-$top/build/release/tankfit}
samples=${2:-10000000}
[ -x "$tankfit" ] || { echo "bench_synth: no tankfit at $tankfit" >&2; exit 66; }
work=$(mktemp -d /tmp/tankfit-bench-synth.XXXXXX)
trap 'rm -rf "$work"' EXIT
duration=$(/usr/bin/python3 -c "print($samples / 10e6)")
cat > "$work/bench.ini" <<INI
; benchmark design: a 540 V half-bridge, 10 MS/s, every channel imperfect
[inverter]
topology = half-bridge
dc_link = 540 V
firing_frequency = 6 kHz
[tank]
capacitance = 4.7 uF
inductance = 20 uH
resistance = 0.35 ohm
[switch]
turnoff_time = 18 us
thyristor_drop = 1.6 V
diode_drop = 1.1 V
[capture]
sample_rate = 10 MS/s
duration = $duration s
seed = 7
adc_bits = 12
i_load.noise = 0.3 A
i_load.range = 400 A
v_out.noise = 0.8 V
v_out.range = 800 V
v_c.noise = 0.8 V
v_c.range = 1000 V
v_ak1.noise = 0.8 V
v_ak1.range = 800 V
v_out.skew = 20 ns
INI
run() {
  # prints wall and CPU seconds, peak RSS and file size of one tankfit synth run
  /usr/bin/python3 - "$tankfit" "$work/bench.ini" "$1" <<'PY'
import os, resource, subprocess, sys, time
tankfit, design, out = sys.argv[1:4]
t = time.monotonic()
subprocess.run([tankfit, "synth", design, "-o", out, "--force"], check=True)
dt = time.monotonic() - t
ru = resource.getrusage(resource.RUSAGE_CHILDREN)
print("%.2f s wall (%.2f s user + %.2f s sys)  peak RSS %.1f MiB  %.0f MB" %
      (dt, ru.ru_utime, ru.ru_stime, ru.ru_maxrss / 1024.0, os.path.getsize(out) / 1e6))
PY
}
echo "tankfit synth, $samples samples x 6 channels ($(nproc) cores, load: $(cut -d' ' -f1-3 /proc/loadavg))"
printf 'CSV: '; run "$work/bench.csv"
rm -f "$work/bench.csv"
printf 'WAV: '; run "$work/bench.wav"
