#!/usr/bin/env python3
"""Reference absmean ternarization in numpy, written from the recipe in
pack/FORMAT.md, for ternkit's tests to compare against.

usage: absmean.py IN ROWS COLS GRANULARITY SCALE_RULE EPSILON TIE SUM OUT_TRITS OUT_SCALES

IN holds ROWS*COLS little-endian float32 values in C order. GRANULARITY is
tensor, row or group:N; SCALE_RULE reciprocal or quotient; TIE half-even or
half-away; SUM blocked16, strided16 or sequential (the order of gamma's sum). OUT_TRITS receives int8 trits, OUT_SCALES little-endian float32
scales, one per group in C order.
"""
import sys

import numpy as np


def strided16(a):
    """The strided16 sum of each row of a (float64): element i to partial
    sum i mod 16 (zero padding adds nothing), combined as FORMAT.md says."""
    n = a.shape[1]
    padded = np.pad(a, ((0, 0), (0, -n % 16)))
    p = np.add.accumulate(padded.reshape(len(a), -1, 16), axis=1)[:, -1, :]
    t = [(p[:, k] + p[:, k + 4]) + (p[:, k + 8] + p[:, k + 12]) for k in range(4)]
    return (t[0] + t[2]) + (t[1] + t[3])


def main():
    inp, rows, cols, gran, rule, eps, tie, order, out_trits, out_scales = sys.argv[1:]
    rows, cols, eps = int(rows), int(cols), float(eps)
    w = np.fromfile(inp, dtype="<f4").reshape(rows, cols)
    if gran == "tensor":
        groups = w.reshape(1, -1)
    elif gran == "row":
        groups = w
    elif gran.startswith("group:"):
        groups = w.reshape(-1, int(gran[len("group:"):]))
    else:
        sys.exit("unknown granularity " + gran)

    # gamma: mean |W| over each group, summed in float64 in the recipe's
    # order. np.add.accumulate is sequential by definition (each output is
    # the previous one plus the next input), unlike np.sum, which may pair.
    a = np.abs(groups.astype(np.float64))
    n = a.shape[1]
    if order == "sequential":
        total = np.add.accumulate(a, axis=1)[:, -1]
    elif order == "strided16":
        total = strided16(a)
    elif order == "blocked16":
        # blocks of 2^20 elements from the group's first, each summed as
        # strided16, then added in order from 0
        total = np.zeros(len(a))
        for lo in range(0, n, 1 << 20):
            total = total + strided16(a[:, lo:lo + (1 << 20)])
    else:
        sys.exit("unknown sum order " + order)
    gamma = total / n
    if rule == "reciprocal":
        g = np.maximum(gamma.astype(np.float32), np.float32(eps))
        q = np.float32(1) / g
        x = groups * q[:, None]
        scale = np.float32(1) / q
    elif rule == "quotient":
        d = (gamma + eps).astype(np.float32)
        x = groups / d[:, None]
        scale = d
    else:
        sys.exit("unknown scale rule " + rule)
    assert x.dtype == np.float32 and scale.dtype == np.float32

    if tie == "half-even":
        r = np.round(x.astype(np.float64))  # numpy rounds halves to even
    elif tie == "half-away":
        x64 = x.astype(np.float64)
        r = np.sign(x64) * np.floor(np.abs(x64) + 0.5)
    else:
        sys.exit("unknown tie rule " + tie)
    trits = np.clip(r, -1, 1).astype(np.int8)

    trits.reshape(-1).tofile(out_trits)
    scale.astype("<f4").tofile(out_scales)


if __name__ == "__main__":
    main()
