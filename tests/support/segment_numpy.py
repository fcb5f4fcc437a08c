#!/usr/bin/python3
"""Half-bridge current bursts written by numpy (an outside reference for the segmenter).

Usage: segment_numpy.py OUT.csv fd Q spp ncyc noise offset unit sign start_phase
Each firing starts one full damped-sine period A exp(-alpha t) sin(wd t), alpha = wd/(2Q)
(thyristor lobe then diode lobe, each pi/wd long), the firings alternate in sign at
0.4 fd, so dead zones separate the bursts. unit: A, mA or kA (values scaled to match).
"""
import sys
import numpy as np

out = sys.argv[1]
fd, q, spp = float(sys.argv[2]), float(sys.argv[3]), float(sys.argv[4])
ncyc, noise, offset = int(sys.argv[5]), float(sys.argv[6]), float(sys.argv[7])
unit, sign, phase = sys.argv[8], float(sys.argv[9]), float(sys.argv[10])
wd = 2 * np.pi * fd
alpha = wd / (2 * q)
fs, half = fd * spp, 1 / (0.8 * fd)
n = int(round(ncyc * 2 * half * fs))
t = np.arange(n) / fs
i = np.zeros(n)
for k in range(-1, 2 * ncyc + 1):
    ts = k * half + phase
    tau = t - ts
    m = (tau >= 0) & (tau < 1 / fd)
    i[m] += (1 if k % 2 == 0 else -1) * 100 * np.exp(-alpha * tau[m]) * np.sin(wd * tau[m])
i = sign * i + np.random.default_rng(7).normal(0, noise, n) + offset
factor = {"A": 1.0, "mA": 1e3, "kA": 1e-3}[unit]
with open(out, "w") as f:
    f.write("t (s),i_load (%s)\n" % unit)
    np.savetxt(f, np.column_stack([t, i * factor]), delimiter=",", fmt="%.10g")
