#!/usr/bin/env python3
"""A second peer for ternkit's benchmark: the same absmean ternarizer and
2-bit packing as numpy_ternarize.py, in torch tensor operations on the CPU
with one thread per core (Debian python3-torch).

usage: torch_ternarize.py IN.safetensors OUT

Output bytes are the same as numpy_ternarize.py's for the same input.
"""
import json
import os
import struct
import sys
import warnings

import numpy as np
import torch


def floats(dtype, raw):
    if dtype == "F32":
        return torch.from_numpy(raw.view("<f4"))
    if dtype == "F16":
        return torch.from_numpy(raw.view("<f2")).float()
    if dtype == "BF16":
        return torch.from_numpy(raw.view("<i2")).view(torch.bfloat16).float()
    return None


def main():
    src, dst = sys.argv[1:]
    torch.set_num_threads(os.cpu_count())
    # the mapped source is read-only; no tensor made from it is written to
    warnings.filterwarnings("ignore", message="The given NumPy array is not writable")
    with open(src, "rb") as f:
        (n,) = struct.unpack("<Q", f.read(8))
        header = json.loads(f.read(n))
    data = np.memmap(src, dtype=np.uint8, mode="r", offset=8 + n)
    header.pop("__metadata__", None)
    shifts = torch.tensor([0, 2, 4, 6], dtype=torch.uint8)
    with torch.no_grad(), open(dst, "wb") as out:
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
            gamma = w.abs().sum(dtype=torch.float64).item() / w.numel()
            scale = np.float32(1) / max(np.float32(gamma), np.float32(1e-5))
            t = (w * float(scale)).round_().clamp_(-1, 1).to(torch.int8)
            t[t < 0] = 2
            codes = t.view(torch.uint8)
            codes = torch.nn.functional.pad(codes, (0, (-codes.numel()) % 4)).reshape(-1, 4)
            packed = (codes << shifts).sum(dim=1, dtype=torch.uint8)
            out.write(struct.pack("<f", np.float32(1) / scale))
            out.write(packed.numpy().tobytes())


if __name__ == "__main__":
    main()
