#!/usr/bin/python3
"""An independent forward pass of the decoder layout, in torch, written from
the published formulas (not from the Go code): RMSNorm (Zhang & Sennrich
2019), rotary position embedding with the rotate-half pairing (Su et al.
2021; the common open layout), grouped-query causal softmax attention,
the gated MLP down(act(gate(x)) * up(x)) (Shazeer 2020), and for
--int8 the per-token absmax 8-bit fake quantization of the inputs of the
ternary matrices (Dettmers et al. 2022): s = 127 / max|x|,
q = clamp(round(x * s), -128, 127) (torch.round rounds half to even),
y = (q @ W.T) / s with W the dequantized weights (scale * trit).

usage: forward_torch.py JOBS.json
JOBS.json is a list of {"model": MODEL.safetensors, "config": CONFIG.json,
"tokens": [[ids], ...], "ternary": [names] or null}; with "ternary" the
named matrices run on 8-bit activations. Prints, as JSON, per job the
logits: one list of vocab values per token, sequences one after another.
Runs in float32; one process serves every job (torch starts once).
"""
import json
import math
import struct
import sys

import torch


def read_safetensors(path):
    with open(path, "rb") as f:
        data = f.read()
    (n,) = struct.unpack("<Q", data[:8])
    header = json.loads(data[8:8 + n])
    base = 8 + n
    out = {}
    for name, e in header.items():
        if name == "__metadata__" or e["dtype"] != "F32":
            continue
        b, end = e["data_offsets"]
        t = torch.frombuffer(bytearray(data[base + b:base + end]), dtype=torch.float32)
        out[name] = t.reshape(e["shape"])
    return out


def main():
    jobs = json.load(open(sys.argv[1]))
    json.dump([forward(j) for j in jobs], sys.stdout)


def forward(job):
    w = read_safetensors(job["model"])
    cfg = json.load(open(job["config"]))
    seqs = job["tokens"]
    ternary = set(job["ternary"] or [])

    H = cfg["hidden_size"]
    nh = cfg["num_attention_heads"]
    nkv = cfg.get("num_key_value_heads") or nh
    hd = cfg.get("head_dim") or H // nh
    theta = cfg.get("rope_theta", 10000.0)
    eps = cfg.get("rms_norm_eps", 1e-6)
    act = cfg.get("hidden_act", "silu")

    def rmsnorm(x, g):
        return x * torch.rsqrt(x.pow(2).mean(-1, keepdim=True) + eps) * g

    def linear(name, x):
        W = w[name]
        if name not in ternary:
            return x @ W.T
        amax = x.abs().amax(-1, keepdim=True)
        s = torch.where(amax > 0, 127.0 / amax, torch.zeros_like(amax))
        q = torch.clamp(torch.round(x * s), -128, 127)
        y = q @ W.T
        return torch.where(s > 0, y / torch.where(s > 0, s, torch.ones_like(s)), torch.zeros_like(y))

    def rope(x, pos):
        # x: [T, heads, hd]; dim i pairs with i + hd/2, angle pos * theta^(-2i/hd)
        half = hd // 2
        i = torch.arange(half, dtype=torch.float64)
        ang = pos[:, None].double() * theta ** (-2 * i / hd)[None, :]
        cos, sin = ang.cos().float()[:, None, :], ang.sin().float()[:, None, :]
        x1, x2 = x[..., :half], x[..., half:]
        return torch.cat([x1 * cos - x2 * sin, x2 * cos + x1 * sin], dim=-1)

    def activation(x):
        if act == "silu":
            return x * torch.sigmoid(x)
        if act == "relu2":
            return torch.relu(x) ** 2
        return 0.5 * x * (1 + torch.tanh(math.sqrt(2 / math.pi) * (x + 0.044715 * x ** 3)))

    logits = []
    for seq in seqs:
        T = len(seq)
        ids = torch.tensor(seq, dtype=torch.long)
        pos = torch.arange(T)
        x = w["model.embed_tokens.weight"][ids]
        mask = torch.full((T, T), float("-inf")).triu(1)
        for l in range(cfg["num_hidden_layers"]):
            p = f"model.layers.{l}."
            h = rmsnorm(x, w[p + "input_layernorm.weight"])
            qkv = []
            for n in "qkv":
                y = linear(p + f"self_attn.{n}_proj.weight", h)
                if p + f"self_attn.{n}_proj.bias" in w:
                    y = y + w[p + f"self_attn.{n}_proj.bias"]
                qkv.append(y)
            q = rope(qkv[0].reshape(T, nh, hd), pos)
            k = rope(qkv[1].reshape(T, nkv, hd), pos)
            v = qkv[2].reshape(T, nkv, hd)
            k = k.repeat_interleave(nh // nkv, dim=1)  # query head j reads KV head j // (nh / nkv)
            v = v.repeat_interleave(nh // nkv, dim=1)
            scores = torch.einsum("thd,shd->hts", q, k) / math.sqrt(hd) + mask
            attn = torch.einsum("hts,shd->thd", torch.softmax(scores, dim=-1), v).reshape(T, nh * hd)
            if p + "self_attn.inner_norm.weight" in w:
                attn = rmsnorm(attn, w[p + "self_attn.inner_norm.weight"])
            x = x + linear(p + "self_attn.o_proj.weight", attn)
            h = rmsnorm(x, w[p + "post_attention_layernorm.weight"])
            m = activation(linear(p + "mlp.gate_proj.weight", h)) * linear(p + "mlp.up_proj.weight", h)
            if p + "mlp.inner_norm.weight" in w:
                m = rmsnorm(m, w[p + "mlp.inner_norm.weight"])
            x = x + linear(p + "mlp.down_proj.weight", m)
        x = rmsnorm(x, w["model.norm.weight"])
        head = w["lm_head.weight"] if "lm_head.weight" in w else w["model.embed_tokens.weight"]
        logits.extend((x @ head.T).tolist())
    return logits


if __name__ == "__main__":
    main()
