#!/usr/bin/python3
"""Sound files written by independent tools, for tests/test_import_wav.c.

Usage: import_wav_robust.py CASE OUT OUT.expected
       import_wav_robust.py --list

Writers: scipy.io.wavfile (int16, int32, float32, float64, 1..8 channels), Python's
wave module (8-bit unsigned, 16-bit, 24-bit), struct (an RF64 file laid out as EBU
Tech 3306 defines it; sox has no RF64 writer) and sox (WAV, FLAC, W64, AIFF, AU, CAF
at 8/16/24/32 bits and float, 1..8 channels). OUT.expected is

    ok FRAMES CHANNELS RATE FORMAT SUBFORMAT REL_TOL ABS_TOL
    v v ...        (FRAMES lines: the normalised sample of each channel, hex floats)

or "error TEXT" (a TF_ERR_DATA message that must start with OUT and contain TEXT).

Expected values: for files written by scipy or wave, the integer code / 2^(bits-1)
(8-bit unsigned: (code - 128) / 128), or the stored float, as the WAV format defines
them; for integer files written by sox, what sox itself decodes them to (sox FILE -t
f64), an independent reader; for float WAV files written by sox, scipy.io.wavfile's
reading; for other float files written by sox, the signal sox was given, within sox's
own conversion step (sox's W64 reader was found to misplace the float data it wrote:
the bytes of the data chunk hold the signal, its decoding does not). Signals are invented (sines plus a ramp, seeded noise).
"""
import os
import subprocess
import sys
import wave

import numpy as np
from scipy.io import wavfile


def sig(frames, chans, rate, seed=5):
    rng = np.random.default_rng(seed)
    t = np.arange(frames) / rate
    cols = []
    for c in range(chans):
        x = 0.8 * np.sin(2 * np.pi * (1000 + 250 * c) * t + c) + 0.05 * rng.standard_normal(frames)
        cols.append(np.clip(x, -0.999, 0.999))
    return np.array(cols).T


def write_exp(exp, vals, rate, fmt, sub, rel=6e-8, absol=1e-12):
    with open(exp, 'w') as f:
        f.write('ok %d %d %d %s %s %r %r\n' % (vals.shape[0], vals.shape[1], rate, fmt, sub,
                                              rel, absol))
        for row in vals:
            f.write(' '.join(float(v).hex() for v in row) + '\n')


def scipy_case(dtype, chans, rate=48000, frames=1500):
    def run(out, exp):
        x = sig(frames, chans, rate)
        if dtype in ('int16', 'int32'):
            bits = 16 if dtype == 'int16' else 32
            codes = np.round(x * (2 ** (bits - 1) - 1)).astype(dtype)
            wavfile.write(out, rate, codes if chans > 1 else codes[:, 0])
            vals = codes.astype(np.float64) / 2 ** (bits - 1)
            sub = 'PCM_%d' % bits
        else:
            data = x.astype(dtype)
            wavfile.write(out, rate, data if chans > 1 else data[:, 0])
            vals = data.astype(np.float64)
            sub = 'FLOAT' if dtype == 'float32' else 'DOUBLE'
        write_exp(exp, vals, rate, 'wav', sub)
    return run


def wave_case(width, chans, rate=20000, frames=1200):
    def run(out, exp):
        x = sig(frames, chans, rate, seed=9)
        bits = 8 * width
        codes = np.round(x * (2 ** (bits - 1) - 1)).astype(np.int64)
        if width == 1:
            raw = (codes + 128).astype(np.uint8).tobytes()
        elif width == 2:
            raw = codes.astype('<i2').tobytes()
        else:  # 24-bit little-endian, three bytes per sample
            b = np.ascontiguousarray(codes.astype('<i4')).view(np.uint8).reshape(-1, 4)[:, :3]
            raw = b.tobytes()
        with wave.open(out, 'wb') as w:
            w.setnchannels(chans)
            w.setsampwidth(width)
            w.setframerate(rate)
            w.writeframes(raw)
        vals = codes.astype(np.float64) / 2 ** (bits - 1)
        write_exp(exp, vals, rate, 'wav', 'PCM_U8' if width == 1 else 'PCM_%d' % bits)
    return run


def sox_case(ext, args, fmt, sub, chans, rate=16000, frames=1000):
    def run(out, exp):
        x = sig(frames, chans, rate, seed=3)
        raw = out + '.in.f64'
        back = out + '.back.f64'
        x.astype('<f8').tofile(raw)
        target = out
        subprocess.run(['sox', '-D', '-t', 'f64', '-r', str(rate), '-c', str(chans), raw]
                       + args + ['-t', ext, target], check=True)
        subprocess.run(['sox', '-D', '-t', ext, target, '-t', 'f64', back], check=True)
        vals = np.fromfile(back, '<f8').reshape(-1, chans)
        rel, absol = 6e-8, 1e-12
        if sub in ('FLOAT', 'DOUBLE') and ext == 'wav':
            # an exact independent reader of WAV float data: scipy.io.wavfile
            vals = wavfile.read(target)[1].astype(np.float64).reshape(-1, chans)
        elif sub in ('FLOAT', 'DOUBLE'):
            # sox works on 32-bit integer samples inside (its manual) and turns one into
            # a float before scaling it, which keeps 24 bits of full scale: the file
            # holds x within 2^-25 (checked with scipy on its WAV twin). Its own W64
            # reader misplaces the float data (checked on the bytes), so the reference
            # is the signal it was given
            vals, rel, absol = x, 1.2e-7, 3.1e-8
        os.remove(raw)
        os.remove(back)
        write_exp(exp, vals, rate, fmt, sub, rel, absol)
    return run


def case_rf64_by_hand(out, exp):
    # RF64 (EBU Tech 3306, an open standard) written with struct: 'RF64' with the
    # 32-bit sizes set to 0xFFFFFFFF and the real sizes in the 'ds64' chunk
    import struct
    rate, chans, frames = 50000, 3, 700
    x = sig(frames, chans, rate, seed=21)
    codes = np.round(x * 32767).astype('<i2')
    data = codes.tobytes()
    fmt = struct.pack('<HHIIHH', 1, chans, rate, rate * chans * 2, chans * 2, 16)
    body = (b'WAVE' + b'ds64' + struct.pack('<IQQQI', 28, 0, len(data), frames, 0)
            + b'fmt ' + struct.pack('<I', len(fmt)) + fmt
            + b'data' + struct.pack('<I', 0xFFFFFFFF) + data)
    riff_size = len(body)
    body = body.replace(struct.pack('<IQQQI', 28, 0, len(data), frames, 0),
                        struct.pack('<IQQQI', 28, riff_size, len(data), frames, 0), 1)
    open(out, 'wb').write(b'RF64' + struct.pack('<I', 0xFFFFFFFF) + body)
    write_exp(exp, codes.astype(np.float64) / 32768, rate, 'rf64', 'PCM_16')


def case_wave_truncated(out, exp):
    # Python's wave writes the sizes; the copy then loses its last 3 bytes (mid-frame)
    wave_case(2, 2)(out, exp)
    data = open(out, 'rb').read()
    open(out, 'wb').write(data[:-3])
    with open(exp, 'w') as f:
        f.write('error truncated\n')


CASES = {
    'scipy_int16_mono': scipy_case('int16', 1),
    'scipy_int16_stereo': scipy_case('int16', 2),
    'scipy_int32_4ch': scipy_case('int32', 4),
    'scipy_float32_3ch': scipy_case('float32', 3),
    'scipy_float64_8ch': scipy_case('float64', 8),
    'scipy_float32_mono_odd_rate': scipy_case('float32', 1, rate=3125000, frames=900),
    'wave_u8_mono': wave_case(1, 1),
    'wave_16_2ch': wave_case(2, 2),
    'wave_24_3ch': wave_case(3, 3),
    'sox_wav_u8': sox_case('wav', ['-b', '8', '-e', 'unsigned-integer'], 'wav', 'PCM_U8', 1),
    'sox_wav_24_6ch': sox_case('wav', ['-b', '24', '-e', 'signed-integer'], 'wav', 'PCM_24', 6),
    'sox_wav_32_2ch': sox_case('wav', ['-b', '32', '-e', 'signed-integer'], 'wav', 'PCM_32', 2),
    'sox_wav_float_8ch': sox_case('wav', ['-b', '32', '-e', 'floating-point'], 'wav', 'FLOAT', 8),
    'sox_wav_double': sox_case('wav', ['-b', '64', '-e', 'floating-point'], 'wav', 'DOUBLE', 2),
    'sox_flac_16_2ch': sox_case('flac', ['-b', '16'], 'flac', 'PCM_16', 2),
    'sox_flac_24_8ch': sox_case('flac', ['-b', '24'], 'flac', 'PCM_24', 8),
    'sox_flac_8_mono': sox_case('flac', ['-b', '8'], 'flac', 'PCM_S8', 1),
    'sox_w64_float_4ch': sox_case('w64', ['-b', '32', '-e', 'floating-point'], 'w64', 'FLOAT', 4),
    'sox_w64_16': sox_case('w64', ['-b', '16', '-e', 'signed-integer'], 'w64', 'PCM_16', 1),
    'sox_aiff_24_2ch': sox_case('aiff', ['-b', '24'], 'aiff', 'PCM_24', 2),
    'sox_aiff_8': sox_case('aiff', ['-b', '8'], 'aiff', 'PCM_S8', 1),
    'sox_au_16_3ch': sox_case('au', ['-b', '16', '-e', 'signed-integer'], 'au', 'PCM_16', 3),
    'sox_caf_float': sox_case('caf', ['-b', '32', '-e', 'floating-point'], 'caf', 'FLOAT', 2),
    'rf64_by_hand': case_rf64_by_hand,
    'wave_truncated': case_wave_truncated,
}

if __name__ == '__main__':
    if sys.argv[1] == '--list':
        print('\n'.join(CASES))
        sys.exit(0)
    name, out, exp = sys.argv[1:4]
    CASES[name](out, exp)
