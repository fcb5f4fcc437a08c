#!/usr/bin/python3
"""Benchmark capture for bench_import.sh (invented values, not a measurement).

Usage: gen_bench_capture.py N OUT.csv OUT.wav

Writes N rows of "time,v_out,i_load,v_cap" (time printed with 8 significant
digits, channels with 6, e.g. -1.23456e-03) at 10 MS/s, and the same three
channels as a 16-bit PCM WAV (Python's wave module) with a sidecar
OUT.wav.tfscale giving the full-scale values.
"""
import sys
import wave

import numpy as np

FS = 10e6
FULL = (500.0, 100.0, 500.0)
CHUNK = 250_000


def signals(t, rng):
    # a decaying 20 kHz ring, restarted every 62.5 us, plus noise
    tau = np.mod(t, 62.5e-6)
    ring = np.exp(-6.25e3 * tau) * np.sin(2 * np.pi * 19.7e3 * tau)
    v = 200.0 * np.sign(np.sin(2 * np.pi * 8e3 * t)) + rng.normal(0, 0.8, t.size)
    i = 60.0 * ring + rng.normal(0, 0.2, t.size)
    vc = -180.0 * np.exp(-6.25e3 * tau) * np.cos(2 * np.pi * 19.7e3 * tau) + rng.normal(0, 0.8, t.size)
    return v, i, vc


def main(n, csv_path, wav_path):
    rng = np.random.default_rng(2024)
    t0 = -(n // 2) / FS
    with open(csv_path, 'w', buffering=1 << 22) as f, wave.open(wav_path, 'wb') as w:
        w.setnchannels(3)
        w.setsampwidth(2)
        w.setframerate(int(FS))
        f.write('time_s,v_out (V),i_load (A),v_cap (V)\n')
        for a in range(0, n, CHUNK):
            b = min(n, a + CHUNK)
            t = t0 + np.arange(a, b, dtype=np.float64) / FS
            v, i, vc = signals(t, rng)
            flat = np.empty(4 * (b - a))
            flat[0::4], flat[1::4], flat[2::4], flat[3::4] = t, v, i, vc
            f.write(('%.7e,%.5e,%.5e,%.5e\n' * (b - a)) % tuple(flat.tolist()))
            x = np.stack([v, i, vc], axis=1) / np.array(FULL) * 32768.0
            w.writeframes(np.clip(np.rint(x), -32768, 32767).astype('<i2').tobytes())
    with open(wav_path + '.tfscale', 'w') as s:
        s.write('# full-scale values of %s (invented bench capture)\n' % wav_path)
        for name, unit, full in zip(('v_out', 'i_load', 'v_cap'), ('V', 'A', 'V'), FULL):
            s.write('%s %s %g\n' % (name, unit, full))
        s.write('t0 = %r\n' % t0)


if __name__ == '__main__':
    main(int(sys.argv[1]), sys.argv[2], sys.argv[3])
