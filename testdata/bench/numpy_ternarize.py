#!/usr/bin/env python3
"""The peer a release engineer would script instead of ternkit: a plain
numpy absmean ternarizer with 2-bit packing, for ternkit's benchmark.

usage: numpy_ternarize.py IN.safetensors OUT

Reads a safetensors file (F32, F16 or BF16 tensors), ternarizes every 2-D
float tensor whose name has neither "embed" nor "lm_head" (absmean per
tensor: scale = 1/max(mean|W|, 1e-5), trit = clip(round(W*scale), -1, 1)),
packs 4 trits per byte (0 -> 0, +1 -> 1, -1 -> 2, low bits first) and
writes, per tensor, its name, the scale and the packed bytes, kept tensors
as their raw bytes. No hashing, no checks: the straightforward script,
written to be fast the plain way: the input is mapped, not read into
memory; arithmetic is float32 with in-place operations; the mean is
accumulated in float64 without a float64 copy of the tensor.
"""
import json
import struct
import sys

import numpy as np


def floats(dtype, raw):
    if dtype == "F32":
        return raw.view("<f4")
    if dtype == "F16":
        return raw.view("<f2").astype(np.float32)
    if dtype == "BF16":
        w = raw.view("<u2").astype(np.uint32)
        w <<= 16
        return w.view(np.float32)
    return None


def main():
    src, dst = sys.argv[1:]
    with open(src, "rb") as f:
        (n,) = struct.unpack("<Q", f.read(8))
        header = json.loads(f.read(n))
    data = np.memmap(src, dtype=np.uint8, mode="r", offset=8 + n)
    header.pop("__metadata__", None)
    with open(dst, "wb") as out:
        for name, info in sorted(header.items(), key=lambda kv: kv[1]["data_offsets"][0]):
            begin, end = info["data_offsets"]
            raw = data[begin:end]
            out.write(name.encode() + b"\n")
            if len(info["shape"]) != 2 or "embed" in name or "lm_head" in name:
                out.write(raw)
                continue
            w = floats(info["dtype"], raw)
            if w is None:
                out.write(raw)
                continue
            a = np.abs(w)
            gamma = a.mean(dtype=np.float64)
            scale = np.float32(1) / max(np.float32(gamma), np.float32(1e-5))
            np.multiply(w, scale, out=a)
            np.rint(a, out=a)
            np.clip(a, -1, 1, out=a)
            t = a.astype(np.int8)
            t[t < 0] = 2
            codes = t.view(np.uint8)
            codes = np.pad(codes, (0, (-len(codes)) % 4)).reshape(-1, 4)
            packed = codes[:, 0] | (codes[:, 1] << 2) | (codes[:, 2] << 4) | (codes[:, 3] << 6)
            out.write(struct.pack("<f", np.float32(1) / scale))
            out.write(packed.tobytes())


if __name__ == "__main__":
    main()
