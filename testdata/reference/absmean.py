#!/usr/bin/env python3
"""Reference absmean ternarization in numpy, written from the recipe in
pack/FORMAT.md, for ternkit's tests to compare against.

usage: absmean.py IN ROWS COLS GRANULARITY SCALE_RULE EPSILON TIE OUT_TRITS OUT_SCALES

IN holds ROWS*COLS little-endian float32 values in C order. GRANULARITY is
tensor, row or group:N; SCALE_RULE reciprocal or quotient; TIE half-even or
half-away. OUT_TRITS receives int8 trits, OUT_SCALES little-endian float32
scales, one per group in C order.
"""
import sys

import numpy as np


def main():
    inp, rows, cols, gran, rule, eps, tie, out_trits, out_scales = sys.argv[1:]
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

    # gamma: mean |W| over each group, in float64
    gamma = np.abs(groups.astype(np.float64)).mean(axis=1)
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
