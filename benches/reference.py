#!/usr/bin/env python3
"""Vectorised numpy reference of septum's core analysis, for benchmarking.

    python3 benches/reference.py RUN_DIR [--pairs RESULTS/pairs.csv] [--harmonics 5]

Reads the same run folder as `septum analyze` (run.json and the capture WAVs:
int16/int24/int32 PCM or float32, plain or WAVE_FORMAT_EXTENSIBLE, parsed here
from the RIFF chunks) and, for every drive capture:

  1. coarse frequency: Hann-windowed FFT peak within +-1 % of nominal,
     parabolic interpolation on the log magnitude;
  2. steady span on the aggressor: envelope of blocks of whole periods
     (>= 10 ms), each block mixed down at the coarse frequency; the longest
     run of blocks near the tone level, less one guard block at each end;
  3. frequency: Gauss-Newton iterations of the sine fit with harmonics,
     extended by the derivative column, on the aggressor's steady span;
  4. one least-squares fit (DC, fundamental, harmonics 2..H below 0.49 fs)
     on every channel, normal equations over a cos/sin design matrix;
  5. residual rms floor per channel, local noise next to the tone (Hann,
     mixed down once and decimated by 16, bins 3..41 either side, censored
     mean) and the detection limit 4.3 sigma;
  6. separation of every aggressor/victim pair (the limit when floor-limited).

It computes a subset of what `septum analyze` writes (no spectra, Welch bands,
A-weighting, drive quality, out-of-band or coupling figures), so a speed
comparison against septum is, if anything, in numpy's favour.

Prints one summary line with the wall time (reading included) and the worst
separation; with --pairs, also the worst separation of septum's pairs.csv and
the difference.
"""

import argparse
import json
import os
import sys
import time

import numpy as np

DETECTION_FACTOR = 4.3
SEARCH = 0.01
OFFSETS = np.arange(3, 42)
CENSOR = 4.0


def read_wav(path):
    """(frames x channels float32 array, sample rate) from a RIFF/WAVE file."""
    with open(path, "rb") as f:
        raw = f.read()
    if raw[:4] != b"RIFF" or raw[8:12] != b"WAVE":
        raise ValueError(f"{path}: not a RIFF/WAVE file")
    pos, fmt, data = 12, None, None
    while pos + 8 <= len(raw):
        cid = raw[pos:pos + 4]
        size = int.from_bytes(raw[pos + 4:pos + 8], "little")
        body = pos + 8
        if cid == b"fmt ":
            tag = int.from_bytes(raw[body:body + 2], "little")
            nch = int.from_bytes(raw[body + 2:body + 4], "little")
            rate = int.from_bytes(raw[body + 4:body + 8], "little")
            bits = int.from_bytes(raw[body + 14:body + 16], "little")
            if tag == 0xFFFE:  # WAVE_FORMAT_EXTENSIBLE: the sub-format GUID starts with the tag
                tag = int.from_bytes(raw[body + 24:body + 26], "little")
            fmt = (tag, nch, rate, bits)
        elif cid == b"data":
            data = (body, min(size, len(raw) - body))
        pos = body + size + (size & 1)
    if fmt is None or data is None:
        raise ValueError(f"{path}: no fmt or data chunk")
    tag, nch, rate, bits = fmt
    buf = memoryview(raw)[data[0]:data[0] + data[1]]
    if tag == 3 and bits == 32:
        x = np.frombuffer(buf, dtype="<f4")
    elif tag == 1 and bits in (16, 32):
        dt = "<i2" if bits == 16 else "<i4"
        x = np.frombuffer(buf, dtype=dt).astype(np.float32) / np.float32(2.0 ** (bits - 1))
    elif tag == 1 and bits == 24:
        b = np.frombuffer(buf, dtype=np.uint8).reshape(-1, 3)
        v = (b[:, 0].astype(np.int32) | (b[:, 1].astype(np.int32) << 8)
             | (b[:, 2].astype(np.int32) << 16))
        v = (v << 8) >> 8  # sign-extend
        x = v.astype(np.float32) / np.float32(2.0 ** 23)
    else:
        raise ValueError(f"{path}: unsupported format tag {tag}, {bits} bits")
    frames = x.size // nch
    return x[:frames * nch].reshape(frames, nch), rate


def hann(n):
    """Periodic Hann window."""
    return 0.5 - 0.5 * np.cos(2.0 * np.pi * np.arange(n) / n)


def coarse_frequency(x, fs, nominal):
    n = x.size
    spec = np.fft.rfft((x - x.mean()) * hann(n))
    p = spec.real ** 2 + spec.imag ** 2
    bin_hz = fs / n
    lo = max(int(np.floor(nominal * (1 - SEARCH) / bin_hz)) - 2, 1)
    hi = min(int(np.ceil(nominal * (1 + SEARCH) / bin_hz)) + 2, p.size - 2)
    k = lo + int(np.argmax(p[lo:hi + 1]))
    a, b, c = np.log(np.maximum(p[k - 1:k + 2], 1e-300))
    den = a - 2 * b + c
    delta = np.clip(0.5 * (a - c) / den, -0.5, 0.5) if den != 0 else 0.0
    return (k + delta) * bin_hz


def steady_span(x, fs, f):
    period = fs / f
    block = int(max(round(max(np.ceil(0.01 * fs / period), 1.0) * period), 8))
    nb = x.size // block
    if nb < 5:
        raise ValueError("capture too short")
    n = np.arange(nb * block)
    z = (x[:nb * block] * np.exp(-1j * (2 * np.pi * f / fs) * n)).reshape(nb, block).sum(axis=1)
    level = 10 * np.log10(np.maximum(np.abs(z) ** 2 * 4 / block ** 2, 1e-30))
    ref = np.sort(level)[nb * 9 // 10]
    loud = level[np.abs(level - ref) < 1.0]
    tol = np.clip(4 * loud.std(), 0.05, 1.0)
    steady = np.concatenate(([0], (np.abs(level - ref) <= tol).astype(np.int8), [0]))
    edges = np.diff(steady)
    starts, ends = np.flatnonzero(edges == 1), np.flatnonzero(edges == -1)
    i = int(np.argmax(ends - starts))
    s, e = starts[i] + 1, ends[i] - 1
    if e <= s:
        raise ValueError("no steady span")
    return s * block, e * block


def design(omega, n, terms):
    """[1, cos(w t), sin(w t), cos(2 w t), ...] with t from the record's centre.

    One complex exponential for the fundamental; the harmonics are its powers."""
    t = np.arange(n) - (n - 1) / 2.0
    z1 = np.exp(1j * omega * t)
    a = np.empty((n, 1 + 2 * terms), order="F")
    a[:, 0] = 1.0
    z = z1
    for k in range(terms):
        if k:
            z = z * z1
        a[:, 1 + 2 * k] = z.real
        a[:, 2 + 2 * k] = z.imag
    return a, t


def n_terms(f, fs, max_h):
    return max(1, sum(1 for k in range(1, max_h + 1) if k * f < 0.49 * fs))


def estimate_frequency(x, fs, nominal, max_h):
    n = x.size
    omega = 2 * np.pi * coarse_frequency(x, fs, nominal) / fs
    terms = n_terms(omega * fs / (2 * np.pi), fs, max_h)
    xd = x.astype(np.float64)
    scale = n / 2.0
    k = np.arange(1, terms + 1)
    for _ in range(30):
        a, t = design(omega, n, terms)
        theta = np.linalg.solve(a.T @ a, a.T @ xd)
        c, s = theta[1::2], theta[2::2]
        # d model / d omega = t * sum_k k (-c_k sin + s_k cos), scaled
        deriv = (a[:, 2::2] @ (-c * k) + a[:, 1::2] @ (s * k)) * t / scale
        j = np.column_stack((a, deriv))
        step = np.linalg.solve(j.T @ j, j.T @ xd)[-1] / scale
        omega += step
        if abs(step * n) < 1e-9:
            break
    return omega, terms


def smooth_len(n):
    """The largest length not above n whose prime factors are 2, 3 and 5."""
    best, p2 = 1, 1
    while p2 <= n:
        p3 = p2
        while p3 <= n:
            p5 = p3
            while p5 <= n:
                best = max(best, p5)
                p5 *= 5
            p3 *= 3
        p2 *= 2
    return best


def quadrature_sigma(resid, f, fs, terms, decimation=16):
    """Per channel: std of one quadrature part of a fitted tone at f.

    The residual is Hann-weighted, mixed down to baseband once and summed in
    blocks of `decimation` samples; the noise next to the tone is read off a
    short FFT of that baseband (bins 3..41 either side, censored mean)."""
    n = resid.shape[0]
    blocks = smooth_len(n // decimation)
    m = blocks * decimation
    w = hann(m)
    mix = w * np.exp(-1j * (2 * np.pi * f / fs) * np.arange(m))
    base = (resid[:m] * mix[:, None]).reshape(blocks, decimation, -1).sum(axis=1)
    y = np.fft.fft(base, axis=0)
    bin_hz = fs / m
    idx, freqs = [], []
    for sign in (-1, 1):
        fk = f + sign * OFFSETS * bin_hz
        idx.append(np.where(sign > 0, OFFSETS, blocks - OFFSETS))
        freqs.append(fk)
    idx, freqs = np.concatenate(idx), np.concatenate(freqs)
    h = np.arange(0, max(terms, 5) + 1)
    near = (np.abs(freqs[:, None] - h[None, :] * f) < 1.5 * bin_hz).any(axis=1)
    keep = ~near & (freqs >= 2 * bin_hz) & (freqs <= fs / 2 - 2 * bin_hz)
    p = np.abs(y[idx[keep]]) ** 2  # (bins, channels)
    mean = np.median(p, axis=0) / np.log(2)
    tmean = (1 - np.exp(-CENSOR) * (1 + CENSOR)) / (1 - np.exp(-CENSOR))
    for _ in range(2):
        c = p <= CENSOR * mean
        mean = np.where(c.any(axis=0),
                        (p * c).sum(axis=0) / np.maximum(c.sum(axis=0), 1) / tmean, mean)
    energy = (w * w).sum()
    return np.sqrt(2 * mean / (energy * n))


def analyze(run_dir, max_h):
    with open(os.path.join(run_dir, "run.json")) as f:
        man = json.load(f)
    fs = float(man["sample_rate_hz"])
    pairs, floors, nbytes = [], [], 0
    for cap in man["captures"]:
        d = cap.get("drive")
        if d is None:
            continue
        path = os.path.join(run_dir, cap["file"])
        nbytes += os.path.getsize(path)
        x, _ = read_wav(path)
        agg = d["channel"] - 1
        nominal = float(d["frequency_hz"])
        coarse = coarse_frequency(x[:, agg], fs, nominal)
        s, e = steady_span(x[:, agg], fs, coarse)
        span = x[s:e]
        omega, terms = estimate_frequency(span[:, agg], fs, nominal, max_h)
        n = e - s
        a, _ = design(omega, n, terms)
        xd = span.astype(np.float64)
        theta = np.linalg.solve(a.T @ a, a.T @ xd)  # (params, channels)
        resid = xd - a @ theta
        floors.append(np.sqrt((resid ** 2).sum(axis=0) / (n - a.shape[1])))
        f_hz = omega * fs / (2 * np.pi)
        sigma = quadrature_sigma(resid, f_hz, fs, terms)
        amp = np.hypot(theta[1], theta[2])
        limit = DETECTION_FACTOR * sigma
        limited = ~(amp > limit)
        victim = np.where(limited, limit, amp)
        sep = 20 * np.log10(amp[agg]) - 20 * np.log10(victim)
        for v in range(x.shape[1]):
            if v != agg:
                pairs.append((nominal, agg + 1, v + 1, sep[v], bool(limited[v])))
    return pairs, floors, nbytes


def worst_in_pairs_csv(path):
    import csv
    with open(path) as f:
        rows = list(csv.DictReader(f))
    w = min(rows, key=lambda r: float(r["separation_db"]))
    return float(w["separation_db"]), int(w["aggressor"]), int(w["victim"])


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("run_dir")
    ap.add_argument("--pairs", help="septum's pairs.csv to compare the worst separation with")
    ap.add_argument("--harmonics", type=int, default=5)
    args = ap.parse_args()
    t0 = time.perf_counter()
    pairs, _floors, nbytes = analyze(args.run_dir, args.harmonics)
    elapsed = time.perf_counter() - t0
    if not pairs:
        print("reference: no drive captures", file=sys.stderr)
        return 1
    w = min(pairs, key=lambda p: p[3])
    line = (f"reference (numpy {np.__version__}): {nbytes / 1e6:.1f} MB in {elapsed:.3f} s, "
            f"{len(pairs)} pairs, worst separation {w[3]:.4f} dB "
            f"(aggressor {w[1]}, victim {w[2]}, {w[0]:g} Hz{', floor-limited' if w[4] else ''})")
    if args.pairs:
        s, a, v = worst_in_pairs_csv(args.pairs)
        line += f"; septum worst {s:.4f} dB ({a}->{v}), difference {w[3] - s:+.4f} dB"
    print(line)
    return 0


if __name__ == "__main__":
    sys.exit(main())
