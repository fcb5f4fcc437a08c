#!/usr/bin/python3
"""Reference CSV writer for tests/test_import_csv.c (Python's standard csv module).

Usage: import_csv_pywrite.py DIALECT ROWS SEED OUT.csv OUT.expected

Writes two metadata rows, a header and ROWS data rows (time + 3 channels) with
the csv module in the named dialect (excel-e: channels printed with %.Ne,
N = 3 .. 8, as scopes print them), and OUT.expected: the first line
"t0 dt", then per row the three channel values rounded to float32 as hex
floats (float.hex of struct-packed '<f', i.e. IEEE round to nearest).
"""
import csv
import random
import struct
import sys


def f32hex(x):
    return struct.unpack('<f', struct.pack('<f', x))[0].hex()


def main(dialect, rows, seed, out, expected):
    rng = random.Random(seed)
    t0, dt = -1.0e-4, 2.0e-8
    comma = dialect == 'semicolon-decimal-comma'
    kw = {
        'excel': dict(dialect='excel'),
        'excel-tab': dict(dialect='excel-tab'),
        'excel-e': dict(dialect='excel'),
        'unix': dict(dialect='unix'),
        'semicolon-quoted': dict(delimiter=';', quoting=csv.QUOTE_ALL, lineterminator='\n'),
        'semicolon-decimal-comma': dict(delimiter=';', lineterminator='\r'),
        'space': dict(delimiter=' ', lineterminator='\n'),
    }[dialect]
    with open(out, 'w', newline='') as f, open(expected, 'w') as e:
        w = csv.writer(f, **kw)
        w.writerow(['Instrument', 'invented bench recorder'])
        w.writerow(['Note', 'values are random'])
        w.writerow(['time (s)', 'v_out [kV]', 'i_load (A)', 'v_cap'])
        e.write('%r %r\n' % (t0, dt))
        for k in range(rows):
            t = t0 + k * dt
            vals = []
            for c in range(3):
                x = rng.uniform(-1, 1) * 10.0 ** rng.randint(-6, 4)
                if rng.random() < 0.1:
                    x = float(rng.randint(-1000, 1000))
                vals.append(x)
            tt = repr(t) if dialect in ('excel', 'unix') else '%.9e' % t
            if dialect == 'excel-e':
                texts = ['%.*e' % (rng.randint(3, 8), x) for x in vals]
                vals = [float(s) for s in texts]
            else:
                texts = [repr(x) for x in vals]
            if comma:
                tt = tt.replace('.', ',')
                texts = [s.replace('.', ',') for s in texts]
            w.writerow([tt] + texts)
            # v_out is in kV: the importer scales it to volts (x 1000, in double)
            e.write('%s %s %s\n' % (f32hex(vals[0] * 1000.0), f32hex(vals[1]), f32hex(vals[2])))


if __name__ == '__main__':
    main(sys.argv[1], int(sys.argv[2]), int(sys.argv[3]), sys.argv[4], sys.argv[5])
