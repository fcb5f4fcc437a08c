#!/usr/bin/python3
"""Capture files written by independent general tools, for tests/test_import_csv.c.

Usage: import_csv_robust.py CASE OUT.csv OUT.expected
       import_csv_robust.py --list

Each CASE writes OUT.csv with a general tool (numpy.savetxt, pandas.DataFrame.to_csv,
Python's csv module, or plain writes for invented instrument-like layouts) and
OUT.expected, what a correct importer must find:

    ok N NCHAN T0 DT [gaps]
    NAME<tab>UNIT        (one line per channel; unit '-' when none)
    v v v ...            (N lines: each channel's value, float32 as a hex float)

or

    error CODE LINE COLUMN TEXT...   (TF_ERR_* code, where the message must point,
                                      and a fragment it must contain)

The expected values come from the numbers the tool printed, read back with Python's
float() (correctly rounded), times the unit's SI factor, rounded to float32 by
numpy.float32 (IEEE 754 round to nearest). All signals are invented.
"""
import csv
import io
import math
import sys

import numpy as np



def f32hex(x):
    return float(np.float32(x)).hex()


def signals(n, nchan, t0, dt, seed=11):
    rng = np.random.default_rng(seed)
    t = t0 + dt * np.arange(n)
    cols = []
    for c in range(nchan):
        f = 20e3 * (1 + 0.1 * c)
        amp = [300.0, 40.0, 550.0, 5.0][c % 4]
        cols.append(amp * np.sin(2 * np.pi * f * t + c) + rng.normal(0, amp * 1e-3, n))
    return t, np.array(cols).T if nchan else np.zeros((n, 0))


class Exp:
    def __init__(self):
        self.lines = []

    def ok(self, values, t0, dt, names, units, gaps=0):
        n, nchan = values.shape
        self.lines.append('ok %d %d %r %r %d' % (n, nchan, t0, dt, gaps))
        for nm, un in zip(names, units):
            self.lines.append('%s\t%s' % (nm, un if un else '-'))
        for row in values:
            self.lines.append(' '.join(f32hex(v) for v in row))

    def error(self, code, line, col, text):
        self.lines.append('error %s %d %d %s' % (code, line, col, text))


def parse_back(text_rows, decimal='.'):
    """Values as a reader must see them: the printed text through float()."""
    return np.array([[float(s.replace(decimal, '.')) if s.strip() != '' else math.nan
                      for s in r] for r in text_rows], dtype=np.float64)


def savetxt_text(arr, **kw):
    b = io.StringIO()
    np.savetxt(b, arr, **kw)
    return b.getvalue()


def rows_of(text, delim):
    out = []
    for ln in text.splitlines():
        if not ln.strip() or ln.startswith('#'):
            continue
        r = ln.split(delim) if delim != ' ' else ln.split()
        try:
            float(r[0])
        except ValueError:
            continue  # a header line
        out.append(r)
    return out


# ---------------------------------------------------------------- cases

def case_np_default(out, e):
    # numpy.savetxt defaults: '%.18e', single space, no header -> time guessed from
    # the increasing first column, channels named by position
    t, v = signals(400, 2, 0.0, 1e-6)
    text = savetxt_text(np.column_stack([t, v]))
    open(out, 'w').write(text)
    vals = parse_back(rows_of(text, ' '))
    e.ok(vals[:, 1:], 0.0, 1e-6, ['col2', 'col3'], ['', ''])


def case_np_header_comment(out, e):
    # header= with numpy's default comments='# ': the column names sit on a '#' line
    t, v = signals(300, 3, -2e-4, 5e-7)
    text = savetxt_text(np.column_stack([t, v]), fmt='%.6e', delimiter=',',
                        header='time [s],v_out [V],i_load [A],v_cap [kV]')
    open(out, 'w').write(text)
    vals = parse_back(rows_of(text, ','))
    vals[:, 3] *= 1000.0
    e.ok(vals[:, 1:], -2e-4, 5e-7, ['v_out', 'i_load', 'v_cap'], ['V', 'A', 'V'])


def case_np_header_plain(out, e):
    # comments='' makes the header a plain first line; '%g' drops trailing zeros
    t, v = signals(250, 2, 1e-3, 1e-6)
    text = savetxt_text(np.column_stack([t, v]), fmt='%.9g', delimiter='\t',
                        header='time\tv_sw\ti_coil', comments='')
    open(out, 'w').write(text)
    vals = parse_back(rows_of(text, '\t'))
    e.ok(vals[:, 1:], 1e-3, 1e-6, ['v_sw', 'i_coil'], ['', ''])


def case_np_footer_semicolon(out, e):
    # header and footer lines with comments='% ', ';' delimiter, fixed '%.7f'
    t, v = signals(200, 2, -0.0001, 1e-6)
    text = savetxt_text(np.column_stack([t, v]), fmt='%.7f', delimiter=';',
                        header='invented rig 3\nt (s);v (V);i (A)', footer='end of record',
                        comments='% ')
    open(out, 'w').write(text)
    vals = parse_back([r for r in rows_of(text, ';') if not r[0].startswith('%')])
    e.ok(vals[:, 1:], -0.0001, 1e-6, ['v', 'i'], ['V', 'A'])


def case_np_large_two_parts(out, e):
    # above 8 MiB the importer splits the data between two parser threads: a commented
    # header, '#' lines in both halves and a footer, two trailing empty columns, repr-
    # printed time from t0 + k*dt crossing zero
    n = 230000
    t, v = signals(n, 2, -1e-3, 1e-8, seed=4)
    body = savetxt_text(np.column_stack([t, v]), fmt=['%r', '%.6e', '%.6e'], delimiter=',')
    lines = [ln + ',,' for ln in body.splitlines()]
    for at in (n // 3, 2 * n // 3):
        lines.insert(at, '# marker (invented)')
    text = '# t [s],v_out [V],i_load [A],,\n' + '\n'.join(lines) + '\n# end of record\n'
    open(out, 'w').write(text)
    vals = parse_back([ln.split(',')[:3] for ln in lines if not ln.startswith('#')])
    e.ok(vals[:, 1:], -1e-3, 1e-8, ['v_out', 'i_load'], ['V', 'A'])


def case_np_hash_comment_inside(out, e):
    # '#' lines inside and after the data (as numpy.loadtxt skips them)
    t, v = signals(100, 1, 0.0, 1e-6)
    rows = ['%.6e,%.4e' % (t[k], v[k, 0]) for k in range(100)]
    lines = ['t,a'] + rows[:40] + ['# pause marker (invented)'] + rows[40:] + ['# end']
    open(out, 'w').write('\n'.join(lines) + '\n')
    e.ok(parse_back([r.split(',')[1:] for r in rows]), 0.0, 1e-6, ['a'], [''])


def case_inst_text_after_data(out, e):
    # free text after the data is not a comment: an error at its line
    rows = ['%.6e,%.4e,%.4e' % (k * 1e-6, k * 0.5, -k * 0.25) for k in range(20)]
    open(out, 'w').write('\n'.join(['t,a,b'] + rows + ['end of record']) + '\n')
    e.error('DATA', 22, 1, "expected a time value (a finite number), found 'end of record'")


def case_np_ms_time(out, e):
    # a time column in milliseconds; negative start
    t, v = signals(500, 1, -0.25e-3, 0.5e-6)
    text = savetxt_text(np.column_stack([t * 1e3, v]), fmt='%.5f', delimiter=',',
                        header='t (ms),i_load (A)', comments='')
    open(out, 'w').write(text)
    vals = parse_back(rows_of(text, ','))
    e.ok(vals[:, 1:], -0.25e-3, 0.5e-6, ['i_load'], ['A'])


def case_np_us_time(out, e):
    t, v = signals(300, 2, -10e-6, 20e-9)
    text = savetxt_text(np.column_stack([t * 1e6, v[:, 0] / 1e3, v[:, 1] * 1e3]),
                        fmt=['%.3f', '%.6f', '%.3f'], delimiter=',',
                        header='Time [us],V_out [kV],I_gate [mA]', comments='')
    open(out, 'w').write(text)
    vals = parse_back(rows_of(text, ','))
    vals[:, 1] *= 1e3
    vals[:, 2] *= 1e-3
    e.ok(vals[:, 1:], -10e-6, 20e-9, ['V_out', 'I_gate'], ['V', 'A'])


def case_pd_index(out, e):
    # pandas default: an unnamed index column first (empty header field)
    import pandas as pd
    t, v = signals(200, 2, 0.0, 2e-6)
    df = pd.DataFrame({'time': t, 'v_out': v[:, 0], 'i_load': v[:, 1]})
    df.to_csv(out)
    text = open(out).read()
    rows = [r.split(',') for r in text.splitlines()[1:]]
    vals = parse_back(rows)
    e.ok(np.column_stack([vals[:, 0], vals[:, 2], vals[:, 3]]), 0.0, 2e-6,
         ['col1', 'v_out', 'i_load'], ['', '', ''])


def case_pd_decimal_comma(out, e):
    import pandas as pd
    t, v = signals(300, 2, -1e-4, 1e-6)
    df = pd.DataFrame({'Zeit (s)': t, 'U (V)': v[:, 0], 'I (A)': v[:, 1]})
    df.to_csv(out, sep=';', decimal=',', float_format='%.8f', index=False)
    text = open(out).read()
    rows = [r.split(';') for r in text.splitlines()[1:]]
    vals = parse_back(rows, ',')
    e.ok(vals[:, 1:], -1e-4, 1e-6, ['U', 'I'], ['V', 'A'])


def case_pd_quoted_header(out, e):
    import pandas as pd
    t, v = signals(150, 3, 0.0, 1e-6)
    df = pd.DataFrame({'time (s)': t, 'v a': v[:, 0], 'v,b': v[:, 1], 'i "c"': v[:, 2]})
    df.to_csv(out, index=False, quoting=csv.QUOTE_NONNUMERIC, float_format='%.6e')
    vals = parse_back([r[1:] for r in csv.reader(open(out))][1:])
    ts = np.array([float(r[0]) for r in list(csv.reader(open(out)))[1:]])
    e.ok(vals, 0.0, 1e-6, ['v a', 'v,b', 'i "c"'], ['', '', ''])
    del ts


def case_pd_nan_gap(out, e):
    # pandas writes NaN as an empty field by default: a gap at line 2+5+1
    import pandas as pd
    t, v = signals(100, 2, 0.0, 1e-6)
    v[5, 1] = math.nan
    pd.DataFrame({'t': t, 'a': v[:, 0], 'b': v[:, 1]}).to_csv(out, index=False)
    e.error('DATA', 7, 3, 'an empty field')


def case_py_quote_all(out, e):
    t, v = signals(120, 2, 0.0, 1e-6)
    with open(out, 'w', newline='') as f:
        w = csv.writer(f, quoting=csv.QUOTE_ALL)
        w.writerow(['time', 'v', 'i'])
        for k in range(len(t)):
            w.writerow([repr(float(t[k])), '%.6e' % v[k, 0], '%.6e' % v[k, 1]])
    vals = parse_back([r[1:] for r in list(csv.reader(open(out)))[1:]])
    e.ok(vals, 0.0, 1e-6, ['v', 'i'], ['', ''])


def case_py_nonnumeric(out, e):
    t, v = signals(120, 2, 0.0, 1e-6)
    with open(out, 'w', newline='') as f:
        w = csv.writer(f, quoting=csv.QUOTE_NONNUMERIC)
        w.writerow(['Time (s)', 'U_c (V)', 'I_L (A)'])
        for k in range(len(t)):
            w.writerow([float(t[k]), float(v[k, 0]), float(v[k, 1])])
    vals = parse_back([r[1:] for r in list(csv.reader(open(out)))[1:]])
    e.ok(vals, 0.0, 1e-6, ['U_c', 'I_L'], ['V', 'A'])


def inst_rows(n, nchan, t0, dt, tfmt='%.9e', vfmt='%.6e', seed=11):
    t, v = signals(n, nchan, t0, dt, seed)
    return [[tfmt % t[k]] + [vfmt % x for x in v[k]] for k in range(n)]


def case_inst_units_row(out, e):
    # invented layout: key,value metadata, a names row, then a units row
    rows = inst_rows(200, 2, -5e-6, 1e-8)
    lines = ['Device,bench recorder (invented)', 'Serial,0000', 'Points,200', '',
             'Time,CH1,CH2', 's,V,A'] + [','.join(r) for r in rows]
    open(out, 'w').write('\n'.join(lines) + '\n')
    e.ok(parse_back([r[1:] for r in rows]), -5e-6, 1e-8, ['CH1', 'CH2'], ['V', 'A'])


def case_inst_units_row_prefixed(out, e):
    rows = inst_rows(200, 2, -5e-6, 1e-8, tfmt='%.4f', vfmt='%.4f')
    # time printed in us, values in kV and mA
    t, v = signals(200, 2, -5e-6, 1e-8)
    rows = [['%.3f' % (t[k] * 1e6), '%.6f' % (v[k, 0] / 1e3), '%.3f' % (v[k, 1] * 1e3)]
            for k in range(200)]
    lines = ['Name;Time;Vout;Igate', 'Unit;us;kV;mA']
    lines = ['Time;Vout;Igate', 'us;kV;mA'] + [';'.join(r) for r in rows]
    open(out, 'w').write('\r\n'.join(lines) + '\r\n')
    vals = parse_back([r[1:] for r in rows])
    vals[:, 0] *= 1e3
    vals[:, 1] *= 1e-3
    e.ok(vals, -5e-6, 1e-8, ['Vout', 'Igate'], ['V', 'A'])


def case_inst_units_row_bracketed(out, e):
    t, v = signals(100, 2, 0.0, 1e-6)
    rows = [['%.6e' % t[k], '%.5e' % v[k, 0], '%.5e' % v[k, 1]] for k in range(100)]
    lines = ['time,v_dc,i_coil', '(s),(V),(A)'] + [','.join(r) for r in rows]
    open(out, 'w').write('\n'.join(lines) + '\n')
    e.ok(parse_back([r[1:] for r in rows]), 0.0, 1e-6, ['v_dc', 'i_coil'], ['V', 'A'])


def case_inst_engineering(out, e):
    # engineering notation: exponents multiple of 3, explicit '+', upper-case E
    t, v = signals(200, 2, -1e-5, 1e-7)

    def eng(x):
        if x == 0:
            return '0.000E+00'
        ex = int(math.floor(math.log10(abs(x)) / 3) * 3)
        return '%.4fE%+03d' % (x / 10 ** ex, ex)
    rows = [[eng(t[k]), eng(v[k, 0]), eng(v[k, 1])] for k in range(200)]
    lines = ['TIME,CH1,CH2'] + [','.join(r) for r in rows]
    open(out, 'w').write('\n'.join(lines) + '\n')
    e.ok(parse_back([r[1:] for r in rows]), -1e-5, 1e-7, ['CH1', 'CH2'], ['', ''])


def case_inst_short2(out, e):
    text = 'time,v\n0,1.5\n1e-6,2.5\n'
    open(out, 'w').write(text)
    e.ok(np.array([[1.5], [2.5]]), 0.0, 1e-6, ['v'], [''])


def case_inst_short3_nonl(out, e):
    # three rows, the last without a line end
    text = 't (us),a (V),b (A)\n-1,1,2\n0,3,4\n1,5,6'
    open(out, 'w').write(text)
    e.ok(np.array([[1, 2], [3, 4], [5, 6]], float), -1e-6, 1e-6, ['a', 'b'], ['V', 'A'])


def case_inst_one_row(out, e):
    open(out, 'w').write('time,v\n0,1.5\n')
    e.error('DATA', 2, 1, 'at least 2')


def case_inst_16ch(out, e):
    t, v = signals(300, 16, 0.0, 4e-8)
    names = ['ch%02d' % (c + 1) for c in range(16)]
    rows = [['%.10e' % t[k]] + ['%.5e' % x for x in v[k]] for k in range(300)]
    lines = ['Time (s),' + ','.join('%s (V)' % n for n in names)] + [','.join(r) for r in rows]
    open(out, 'w').write('\n'.join(lines) + '\n')
    e.ok(parse_back([r[1:] for r in rows]), 0.0, 4e-8, names, ['V'] * 16)


def case_inst_trailing_empty_cols(out, e):
    # two empty columns at the end of every row (and of the header)
    t, v = signals(100, 2, 0.0, 1e-6)
    rows = [['%.6e' % t[k], '%.4e' % v[k, 0], '%.4e' % v[k, 1]] for k in range(100)]
    lines = ['time,v,i,,'] + [','.join(r) + ',,' for r in rows]
    open(out, 'w').write('\n'.join(lines) + '\n')
    e.ok(parse_back([r[1:] for r in rows]), 0.0, 1e-6, ['v', 'i'], ['', ''])


def case_inst_cp1252_micro(out, e):
    # Windows-1252: 0xB5 is the micro sign, 0xB0 the degree sign
    t, v = signals(100, 2, 0.0, 1e-6)
    rows = [['%.3f' % (t[k] * 1e6), '%.4e' % v[k, 0], '%.3f' % (25 + v[k, 1] / 100)]
            for k in range(100)]
    head = 'Time [\xb5s];U_c [V];T_sink [\xb0C]'
    body = '\r\n'.join([head] + [';'.join(r) for r in rows]) + '\r\n'
    open(out, 'wb').write(body.encode('cp1252'))
    e.ok(parse_back([r[1:] for r in rows]), 0.0, 1e-6, ['U_c', 'T_sink'], ['V', '\u00b0C'])


def case_inst_utf8_micro(out, e):
    t, v = signals(100, 1, 0.0, 1e-6)
    rows = [['%.3f' % (t[k] * 1e6), '%.4e' % v[k, 0]] for k in range(100)]
    head = 'Time (\u00b5s),I (\u00b5A)'
    open(out, 'wb').write(('\n'.join([head] + [','.join(r) for r in rows]) + '\n').encode())
    vals = parse_back([r[1:] for r in rows]) * 1e-6
    e.ok(vals, 0.0, 1e-6, ['I'], ['A'])


def case_inst_tabs_spaces(out, e):
    # tabs plus runs of spaces between the fields
    t, v = signals(150, 2, 0.0, 1e-6)
    rows = [['%.6e' % t[k], '%.4e' % v[k, 0], '%.4e' % v[k, 1]] for k in range(150)]
    seps = [' \t', '\t ', '  \t  ']
    lines = ['time \t v_out\t  i_load']
    for k, r in enumerate(rows):
        lines.append(r[0] + seps[k % 3] + r[1] + seps[(k + 1) % 3] + r[2])
    open(out, 'w').write('\n'.join(lines) + '\n')
    e.ok(parse_back([r[1:] for r in rows]), 0.0, 1e-6, ['v_out', 'i_load'], ['', ''])


def case_inst_nan_forms(out, e):
    # NaN/inf spellings; with --gaps interpolate they are filled (gaps column 3)
    t, v = signals(60, 2, 0.0, 1e-6)
    forms = ['NaN', 'nan', 'NAN', '-nan', 'inf', '-inf', 'Inf', 'Infinity', '+inf']
    rows = [['%.6e' % t[k], '%.5e' % v[k, 0], '%.5e' % v[k, 1]] for k in range(60)]
    vals = parse_back([r[1:] for r in rows])
    for j, f in enumerate(forms):
        k = 5 + 5 * j
        rows[k][2] = f
        vals[k, 1] = (vals[k - 1, 1] + vals[k + 1, 1]) / 2
    open(out, 'w').write('\n'.join(['t,a,b'] + [','.join(r) for r in rows]) + '\n')
    e.ok(vals, 0.0, 1e-6, ['a', 'b'], ['', ''], gaps=len(forms))


def case_inst_nan_error(out, e):
    rows = ['0,1,2', '1e-6,NaN,3', '2e-6,4,5']
    open(out, 'w').write('\n'.join(['t,a,b'] + rows) + '\n')
    e.error('DATA', 3, 2, "'NaN'")


def case_inst_trailing_blank(out, e):
    t, v = signals(50, 1, 0.0, 1e-6)
    rows = [['%.6e' % t[k], '%.4e' % v[k, 0]] for k in range(50)]
    open(out, 'w').write('\n'.join(['t,a'] + [','.join(r) for r in rows]) + '\n\n  \n')
    e.ok(parse_back([r[1:] for r in rows]), 0.0, 1e-6, ['a'], [''])


def case_inst_mid_row(out, e):
    # the file ends in the middle of a row (a truncated copy)
    t, v = signals(50, 2, 0.0, 1e-6)
    rows = [['%.6e' % t[k], '%.4e' % v[k, 0], '%.4e' % v[k, 1]] for k in range(50)]
    text = '\n'.join(['t,a,b'] + [','.join(r) for r in rows[:-1]] + [','.join(rows[-1][:2])])
    open(out, 'w').write(text)
    e.error('DATA', 51, 3, 'expected 3 fields as in line 1, found 2')


def case_inst_mid_exponent(out, e):
    # truncated inside the exponent of a number
    t, v = signals(50, 2, 0.0, 1e-6)
    rows = [['%.6e' % t[k], '%.4e' % v[k, 0], '%.4e' % v[k, 1]] for k in range(50)]
    text = '\n'.join(['t,a,b'] + [','.join(r) for r in rows])
    open(out, 'w').write(text[:-(len(rows[-1][2]) + 4)])
    e.error('DATA', 51, 2, "expected a number, found '%s'" % rows[-1][1][:-3])


def case_inst_mid_number(out, e):
    # truncated inside the last number: still a valid (shorter) number -> fine, but the
    # row is kept; cut after the delimiter instead -> empty final field is a gap
    text = 't,a,b\n0,1,2\n1e-6,3,4\n2e-6,5,'
    open(out, 'w').write(text)
    e.error('DATA', 4, 3, 'an empty field')


def case_inst_negative_t0_fixed(out, e):
    t, v = signals(400, 1, -1.2e-3, 2.5e-6)
    rows = [['%.7f' % t[k], '%.3f' % v[k, 0]] for k in range(400)]
    open(out, 'w').write('\n'.join(['"Time (s)","Ch 1 (V)"'] + [','.join(r) for r in rows]) + '\n')
    e.ok(parse_back([r[1:] for r in rows]), -1.2e-3, 2.5e-6, ['Ch 1'], ['V'])


def case_inst_meta_colon(out, e):
    # metadata as 'key: value' and '[section]' lines, then a tab header
    t, v = signals(120, 2, 0.0, 1e-6)
    rows = [['%.6e' % t[k], '%.4e' % v[k, 0], '%.4e' % v[k, 1]] for k in range(120)]
    lines = ['[acquisition]', 'rate: 1 MS/s', 'trigger: ch1 rising', '',
             'time\tch1\tch2'] + ['\t'.join(r) for r in rows]
    open(out, 'w').write('\n'.join(lines) + '\n')
    e.ok(parse_back([r[1:] for r in rows]), 0.0, 1e-6, ['ch1', 'ch2'], ['', ''])


def case_sox_dat(out, e):
    # SoX's text format (sox IN.wav OUT.dat): '; Sample Rate N' and '; Channels N'
    # lines, then time and every channel right-aligned in runs of spaces
    import subprocess
    import tempfile
    with tempfile.TemporaryDirectory() as d:
        wav = d + '/in.wav'
        subprocess.run(['sox', '-D', '-n', '-r', '20000', '-c', '2', '-b', '16', wav,
                        'synth', '0.05', 'sine', '1000', 'sine', '3000'], check=True)
        subprocess.run(['sox', '-D', wav, '-t', 'dat', out], check=True)
    rows = rows_of(open(out).read().replace(';', '#'), ' ')
    e.ok(parse_back([r[1:] for r in rows]), 0.0, 5e-05, ['col2', 'col3'], ['', ''])


def case_py_text_columns(out, e):
    # a logger's layout (Python csv module): a clock-time column named 'Time', the
    # seconds, two channels with decimal commas and a status word; the two text
    # columns are not channels and 'Time' is not the time base
    t, v = signals(600, 2, 0.0, 1e-6)
    rows = [['05:30:00.%06d' % k, ('%.7f' % t[k]).replace('.', ','),
             ('%.5e' % v[k, 0]).replace('.', ','), ('%.5e' % v[k, 1]).replace('.', ','),
             'RUN' if k % 100 else 'MARK'] for k in range(600)]
    with open(out, 'w', newline='') as f:
        w = csv.writer(f, delimiter=';', lineterminator='\r\n')
        w.writerow(['Time', 'Seconds [s]', 'U out [kV]', 'I load (A)', 'Status'])
        w.writerows(rows)
    vals = parse_back([r[2:4] for r in rows], ',')
    vals[:, 0] *= 1000.0
    e.ok(vals, 0.0, 1e-6, ['U out', 'I load'], ['V', 'A'])


CASES = {k[5:]: v for k, v in sorted(globals().items()) if k.startswith('case_')}

if __name__ == '__main__':
    if sys.argv[1] == '--list':
        print('\n'.join(CASES))
        sys.exit(0)
    name, out, exp = sys.argv[1:4]
    e = Exp()
    CASES[name](out, e)
    with open(exp, 'w') as f:
        f.write('\n'.join(e.lines) + '\n')
