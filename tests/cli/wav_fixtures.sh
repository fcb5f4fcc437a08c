#!/bin/sh
# Regenerates the tiny WAV fixtures of the wav_*/inspect_* golden cases with SoX
# (Debian sox) and Debian's python3 standard library. Invented signals only.
# Usage: sh tests/cli/wav_fixtures.sh [OUTDIR]   (default: the tests/ directory itself;
# test_import_wav regenerates them into a temporary OUTDIR and compares byte for byte)
set -eu
out=${1:-$(cd "$(dirname "$0")/.." && pwd)}
mkdir -p "$out/cli" "$out/bad"
cd "$out"
# 10 ms at 48 kHz: two 1 kHz sines of amplitude 0.5 and 0.25 of full scale
sox -D -n -r 48000 -c 2 -b 16 -e signed-integer cli/wav_sine.wav \
    synth 0.01 sine 1000 sine 1000 remix 1v0.5 2v0.25
# three channels with a sidecar: names, units, full scales, a skew and t0
sox -D -n -r 48000 -c 3 -b 16 -e signed-integer cli/wav_scaled.wav \
    synth 0.01 sine 1000 sine 1000 sine 1000 remix 1v0.8 2v0.5 3v0.4
cat > cli/wav_scaled.wav.tfscale <<'SIDECAR'
# scaling of wav_scaled.wav (invented bench set-up)
# name    unit  full-scale  skew
v_out     V     500
i_load    A     100         -12ns
v_cap     V     1k
t0 = -20us
SIDECAR
# a 1 kHz sine driven to 1.5 x full scale: SoX clips every crest
sox -D -n -r 48000 -c 1 -b 16 -e signed-integer cli/wav_clipped.wav \
    synth 0.01 sine 1000 vol 1.5 2>/dev/null
# bad inputs
/usr/bin/python3 - <<'PY'
import struct
def header(channels, data_bytes):
    fmt = struct.pack('<HHIIHH', 1, channels, 48000, 48000 * 2 * max(channels, 1),
                      2 * max(channels, 1), 16)
    return (b'RIFF' + struct.pack('<I', 36 + data_bytes) + b'WAVE' + b'fmt ' +
            struct.pack('<I', 16) + fmt + b'data' + struct.pack('<I', data_bytes))
# the header declares 4000 bytes of samples, the file holds 64
open('bad/wav_truncated.wav', 'wb').write(header(2, 4000) + bytes(64))
# a RIFF header claiming 0 channels
open('bad/wav_zero_channels.wav', 'wb').write(header(0, 64) + bytes(64))
# a valid file whose sidecar has a bad full-scale value on line 3
open('bad/wav_bad_sidecar.wav', 'wb').write(header(2, 64) + bytes(64))
open('bad/wav_bad_sidecar.wav.tfscale', 'w').write(
    '# bad: line 3 has no full-scale value\nv_out V 500\ni_load A\n')
PY
echo "fixtures written under $out/cli and $out/bad"
