#!/usr/bin/python3
"""A second reader of ternkit artifacts (.tkart), written from pack/FORMAT.md.

It shares no code with the Go reader: the layout, the manifest rules and the
codecs are implemented here with numpy, BLAKE3 comes from the b3sum tool
and zstd frames are decoded by the zstd tool (both Debian packages). The
piece chaining values of format 1.4, which b3sum does not print, come from
a BLAKE3 compression function written here with numpy from the BLAKE3
specification.

    tkart_read.py [--trits] FILE...
    tkart_read.py --blake3 FILE...

The second form prints, per file, its BLAKE3 and (over 2^22 bytes) its
piece chaining values, both computed by the numpy BLAKE3 of this file.

prints a JSON array with one object per file: "result" is "ok" or the
failure class of FORMAT.md ("What a reader must reject"), "detail" says why,
and for a valid file "version" and "tensors" give each tensor's name, kind,
codec, shape, stored dtype (kept), granularity and exact flag (ternary,
int8), scale (ternary at tensor granularity), trit counts, and SHA-256
digests of its decoded trits (int8 values), int8 codes, kept bytes and
dequantized or decoded float32 values (little-endian, every NaN written as
0x7FC00000); "companions" (format 1.3) gives each companion file's name,
length and SHA-256.
--trits adds the trits themselves as a string of "-0+", int8 codes and kept
bytes as hex, and the scales of a scales section as numbers.
"""

import datetime
import fractions
import hashlib
import json
import math
import struct
import subprocess
import sys

import numpy as np

MAGIC = b"TKART\x00\r\n"
TRAILER_MAGIC = b"TKEND\x00\r\n"
ALIGN = 64
PREAMBLE_LEN = 64
TRAILER_LEN = 64
MANIFEST_LIMIT = 256 << 20
MANIFEST_MINOR = None  # the manifest's "minor" key, set by parse_manifest
READER_MINOR = 4  # the highest minor version of format 1 this reader implements

# Minor version that defines each codec ("Versioning").
CODEC_SINCE = {"raw": 0, "bits2": 0, "base3": 0, "entropy": 1}
SUM_KEY_SINCE = 2  # the recipe's "sum" key
COMPANIONS_SINCE = 3  # the manifest's "companions" key
SOURCE_SPAN_SINCE = 4  # the tensor's "source_span" key, in place of "source_blake3"
BLOCKED_SUM_SINCE = 4  # the recipe's sum order "blocked16"
MINOR_KEY_SINCE = 4  # the manifest's "minor" key and sections' "piece_cvs"
TRIT_CODECS = ("bits2", "base3", "entropy")
DTYPE_SIZE = {
    "F64": 8, "F32": 4, "F16": 2, "BF16": 2, "F8_E4M3": 1, "F8_E5M2": 1,
    "I64": 8, "I32": 4, "I16": 2, "I8": 1, "U64": 8, "U32": 4, "U16": 2,
    "U8": 1, "BOOL": 1,
}
FLOAT_DTYPES = ("F64", "F32", "F16", "BF16", "F8_E4M3", "F8_E5M2")
CONVERTED_TO = ("F16", "BF16", "F32")
INT64_MAX = (1 << 63) - 1
CHUNK = 1 << 22

# The keys of every manifest object ("Manifest"); a new minor version that
# adds keys adds them here.
KEYS = {
    "manifest": {"format", "version", "minor", "tool", "created", "recipe", "source", "policy",
                 "tensors", "companions", "totals"},
    "companion": {"name", "section"},
    "recipe": {"method", "scale_rule", "epsilon", "tie", "sum"},
    "source": {"files", "metadata"},
    "file": {"name", "bytes", "blake3"},
    "tensor": {"name", "shape", "source_dtype", "kind", "dtype", "codec", "granularity",
               "scale", "scales", "exact", "section", "source_blake3", "source_span", "trits", "stats"},
    "section": {"offset", "length", "blake3", "chunks", "piece_cvs"},
    "trits": {"neg", "zero", "pos"},
    "stats": {"zero_fraction", "clipped_fraction", "rel_rmse", "max_abs_err", "cosine"},
    "totals": {"tensors", "ternary_tensors", "int8_tensors", "kept_tensors", "ternary_params",
               "int8_params", "kept_params", "source_bytes", "ternary_section_bytes",
               "int8_section_bytes", "kept_section_bytes", "bits_per_ternary_weight"},
}


# The keys each object must have ("Manifest": every key not marked
# optional); optional keys may be left out, and no key may be null.
REQUIRED = {
    "manifest": {"format", "version", "tool", "recipe", "source", "tensors", "totals"},
    "recipe": {"method", "scale_rule", "epsilon", "tie"},
    "source": {"files"},
    "file": {"name", "bytes", "blake3"},
    # and one of source_blake3 (1.0 to 1.3) and source_span (1.4)
    "tensor": {"name", "shape", "source_dtype", "kind", "codec", "section"},
    "section": {"offset", "length", "blake3"},
    "trits": KEYS["trits"],
    "stats": KEYS["stats"],
    "totals": KEYS["totals"],
    "companion": {"name", "section"},
}


class Reject(Exception):
    """The file breaks a rule; cls is the failure class."""

    def __init__(self, cls, detail):
        super().__init__(detail)
        self.cls = cls


def blake3_hex(data):
    out = subprocess.run(["b3sum", "--no-names"], input=bytes(data), capture_output=True, check=True)
    return out.stdout.split()[0].decode()


# ---- BLAKE3 from its specification --------------------------------------
#
# The compression function, vectorized with numpy over many chunks (or
# parents) at once: each word is an array with one element per node. It
# gives the chaining values of chunks at any chunk counter, which format
# 1.4's piece records are ("Hashing"), and root hashes, which the tests
# compare with b3sum.

B3_IV = np.array([0x6A09E667, 0xBB67AE85, 0x3C6EF372, 0xA54FF53A,
                  0x510E527F, 0x9B05688C, 0x1F83D9AB, 0x5BE0CD19], dtype=np.uint32)
B3_PERM = (2, 6, 3, 10, 7, 0, 4, 13, 1, 11, 12, 5, 9, 14, 15, 8)
CHUNK_START, CHUNK_END, PARENT, ROOT = 1, 2, 4, 8
B3_CHUNK = 1024  # bytes per chunk
PIECE_CHUNKS = CHUNK // B3_CHUNK


def _rotr(x, n):
    return (x >> np.uint32(n)) | (x << np.uint32(32 - n))


def b3_compress(cv, m, counter, block_len, flags):
    """Compress 64-byte blocks: cv is 8 word arrays, m 16, counter an
    integer array (64 bits), block_len and flags integers or arrays.
    Returns the 16 output word arrays."""
    n = len(counter)
    counter = np.asarray(counter, dtype=np.uint64)
    v = [np.array(w, dtype=np.uint32) for w in cv] + [np.full(n, B3_IV[i], dtype=np.uint32) for i in range(4)] + [
        (counter & np.uint64(0xFFFFFFFF)).astype(np.uint32), (counter >> np.uint64(32)).astype(np.uint32),
        np.broadcast_to(np.asarray(block_len, dtype=np.uint32), (n,)).copy(),
        np.broadcast_to(np.asarray(flags, dtype=np.uint32), (n,)).copy()]
    m = list(m)

    def g(a, b, c, d, x, y):
        v[a] = v[a] + v[b] + x
        v[d] = _rotr(v[d] ^ v[a], 16)
        v[c] = v[c] + v[d]
        v[b] = _rotr(v[b] ^ v[c], 12)
        v[a] = v[a] + v[b] + y
        v[d] = _rotr(v[d] ^ v[a], 8)
        v[c] = v[c] + v[d]
        v[b] = _rotr(v[b] ^ v[c], 7)

    for r in range(7):
        g(0, 4, 8, 12, m[0], m[1])
        g(1, 5, 9, 13, m[2], m[3])
        g(2, 6, 10, 14, m[4], m[5])
        g(3, 7, 11, 15, m[6], m[7])
        g(0, 5, 10, 15, m[8], m[9])
        g(1, 6, 11, 12, m[10], m[11])
        g(2, 7, 8, 13, m[12], m[13])
        g(3, 4, 9, 14, m[14], m[15])
        if r < 6:
            m = [m[B3_PERM[i]] for i in range(16)]
    return [v[i] ^ v[i + 8] for i in range(8)] + [v[i + 8] ^ np.asarray(cv[i], dtype=np.uint32) for i in range(8)]


def _chunk_words(data, nblocks):
    """data (at most nblocks·64 bytes) as nblocks blocks of 16 words, zero
    padded: an array [nblocks][16] of uint32."""
    buf = np.zeros(nblocks * 64, dtype=np.uint8)
    buf[:len(data)] = np.frombuffer(data, dtype=np.uint8)
    return buf.view("<u4").reshape(nblocks, 16)


def b3_chunks(data, counter0, root=False):
    """The chaining values (8 word arrays) of the chunks of data, numbered
    from counter0; with root, data is one chunk and the root output of it
    is returned instead (16 words)."""
    full = len(data) // B3_CHUNK if len(data) % B3_CHUNK else len(data) // B3_CHUNK - 1
    full = max(full, 0)
    cvs = [np.zeros(0, dtype=np.uint32) for _ in range(8)]
    if full and not root:
        words = np.frombuffer(data[:full * B3_CHUNK], dtype="<u4").reshape(full, 16, 16)
        cv = [np.full(full, B3_IV[i], dtype=np.uint32) for i in range(8)]
        counters = np.arange(counter0, counter0 + full, dtype=np.uint64)
        for b in range(16):
            m = [words[:, b, w].copy() for w in range(16)]
            flags = (CHUNK_START if b == 0 else 0) | (CHUNK_END if b == 15 else 0)
            cv = b3_compress(cv, m, counters, 64, flags)[:8]
        cvs = cv
    # the last chunk (1 to 1024 bytes, or 0 for empty data), alone
    last = data[full * B3_CHUNK:]
    nblocks = max(1, (len(last) + 63) // 64)
    words = _chunk_words(last, nblocks)
    cv = [np.array([B3_IV[i]], dtype=np.uint32) for i in range(8)]
    for b in range(nblocks):
        flags = (CHUNK_START if b == 0 else 0) | (CHUNK_END if b == nblocks - 1 else 0)
        blen = 64 if b < nblocks - 1 else len(last) - 64 * b
        if root and b == nblocks - 1:
            flags |= ROOT
        out = b3_compress(cv, [words[b:b + 1, w] for w in range(16)], [counter0 + full], blen, flags)
        cv = out[:8]
    if root:
        return out
    return [np.concatenate([cvs[i], cv[i]]) for i in range(8)]


def b3_parents(left, right, flags=PARENT):
    """The outputs of parents over pairs of chaining values (arrays)."""
    n = len(left[0])
    return b3_compress([np.full(n, B3_IV[i], dtype=np.uint32) for i in range(8)], list(left) + list(right),
                       np.zeros(n, dtype=np.uint64), 64, flags)


def b3_node(cvs, root=False):
    """The chaining value (8 words; with root, the root output, 16 words) of
    the node over chaining values cvs (8 arrays of n ≥ 2, or n = 1 without
    root), split as BLAKE3 splits: the left child the largest power of two
    below n."""
    n = len(cvs[0])
    if n == 1:
        return [w[:1] for w in cvs]
    left = 1
    while left * 2 < n:
        left *= 2
    lc = [w[:left] for w in cvs]
    while len(lc[0]) > 1:  # a complete subtree, level by level
        lc = b3_parents([w[0::2] for w in lc], [w[1::2] for w in lc])[:8]
    rc = b3_node([w[left:] for w in cvs])
    out = b3_parents(lc, rc, PARENT | (ROOT if root else 0))
    return out if root else out[:8]


def words_hex(words):
    return b"".join(struct.pack("<I", int(w[0])) for w in words[:8]).hex()


def b3_hash(data):
    """BLAKE3 of data, from the specification (the tests compare it with b3sum)."""
    if len(data) <= B3_CHUNK:
        return words_hex(b3_chunks(data, 0, root=True))
    return words_hex(b3_node(b3_chunks(data, 0), root=True))


def b3_piece_cv(piece, k):
    """The chaining value of piece k of a section ("Hashing", format 1.4):
    the node of its chunks, numbered from k·4096, in the section's tree."""
    return b3_node(b3_chunks(piece, k * PIECE_CHUNKS))


def b3_section_pieces(section):
    """The chaining values of a section's pieces and the section's BLAKE3
    joined from them (more than one piece)."""
    cvs = [b3_piece_cv(section[k * CHUNK:(k + 1) * CHUNK], k) for k in range((len(section) + CHUNK - 1) // CHUNK)]
    joined = b3_node([np.concatenate([c[i] for c in cvs]) for i in range(8)], root=True)
    return [words_hex(c) for c in cvs], words_hex(joined)


# ---- manifest -----------------------------------------------------------

def bad(detail):
    return Reject("manifest", detail)


def parse_json(body):
    def pairs(items):
        obj = {}
        for k, v in items:
            if k in obj:
                raise bad("key %r appears twice" % k)
            obj[k] = v
        return obj

    def constant(name):
        raise bad("%s is not JSON" % name)

    try:
        text = body.decode("utf-8")
    except UnicodeDecodeError as e:
        raise bad("not valid UTF-8: %s" % e)
    try:
        doc = json.loads(text, object_pairs_hook=pairs, parse_constant=constant, parse_float=Decimal)
    except json.JSONDecodeError as e:
        raise bad("invalid JSON: %s" % e)
    no_lone_surrogates(doc)
    return doc


class Decimal(float):
    """A JSON number with a fraction or exponent: its float64 value (the
    nearest binary64, which float() gives) and its text, for the float32
    keys, which round the decimal directly ("Numbers")."""

    def __new__(cls, text):
        v = super().__new__(cls, text)
        v.text = text
        return v


def no_lone_surrogates(v):
    """A \\u escape of U+D800..U+DFFF that is not a high surrogate followed
    by a low one decodes to a lone surrogate code point: rejected."""
    if v is None:
        raise bad("a value is null (no key takes null: an optional key is left out)")
    if isinstance(v, float) and math.isinf(v):
        raise bad("number %s is beyond the float64 range" % getattr(v, "text", v))
    if isinstance(v, str):
        if any(0xD800 <= ord(c) <= 0xDFFF for c in v):
            raise bad("string %r holds a lone surrogate escape" % v)
    elif isinstance(v, dict):
        for k, x in v.items():
            no_lone_surrogates(k)
            no_lone_surrogates(x)
    elif isinstance(v, list):
        for x in v:
            no_lone_surrogates(x)


def obj(v, what, path):
    """An object with only the keys of KEYS[what]; null reads as {}."""
    if v is None:
        return {}
    if not isinstance(v, dict):
        raise bad("%s is not an object" % path)
    for k in v:
        if k not in KEYS[what]:
            raise bad("%s: unknown key %r" % (path, k))
    for k in sorted(REQUIRED[what]):
        if k not in v:
            raise bad("%s: required key %r is missing" % (path, k))
    return v


def arr(v, path):
    if v is None:
        return []
    if not isinstance(v, list):
        raise bad("%s is not an array" % path)
    return v


def integer(v, path):
    if v is None:
        return 0
    if isinstance(v, bool) or not isinstance(v, int) or not -INT64_MAX - 1 <= v <= INT64_MAX:
        raise bad("%s is not a 64-bit integer: %r" % (path, v))
    return v


def number(v, path):
    if v is None:
        return 0.0
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        raise bad("%s is not a number: %r" % (path, v))
    return float(v)


def string(v, path):
    if v is None:
        return ""
    if not isinstance(v, str):
        raise bad("%s is not a string" % path)
    return v


def hash_hex(v, path):
    s = string(v, path)
    if len(s) != 64 or any(c not in "0123456789abcdef" for c in s):
        raise bad("%s: %r is not 64 lowercase hex digits" % (path, s))
    return s


def float32_of(v, path):
    """A JSON number rounded once, directly, to the nearest float32, ties
    to even ("Numbers"); out of range becomes inf, judged later."""
    number(v, path)
    if v is None:
        return np.float32(0)
    text = getattr(v, "text", None) or str(v)
    with np.errstate(over="ignore"):
        guess = np.float32(float(v))
    q = fractions.Fraction(text)
    if q == 0 or np.isinf(guess):
        return guess
    best = None
    for c in (guess, np.nextafter(guess, np.float32(np.inf)), np.nextafter(guess, np.float32(-np.inf))):
        if not np.isfinite(c):
            continue
        d = abs(fractions.Fraction(float(c)) - q)
        even = int(np.array(c, dtype="<f4").view("<u4")) & 1 == 0
        if best is None or d < best[0] or (d == best[0] and even):
            best = (d, c)
    return best[1]


def parse_manifest(body):
    m = obj(parse_json(body), "manifest", "manifest")
    if string(m.get("format"), "format") != "ternkit-artifact":
        raise bad("format %r" % m.get("format"))
    if integer(m.get("version"), "version") != 1:
        raise bad("version %r" % m.get("version"))
    global MANIFEST_MINOR
    MANIFEST_MINOR = None
    if "minor" in m:
        MANIFEST_MINOR = integer(m.get("minor"), "minor")
        if MANIFEST_MINOR != MINOR_KEY_SINCE:
            raise bad("minor %r (4 is the only value of this version)" % MANIFEST_MINOR)
    string(m.get("tool"), "tool")
    created = string(m.get("created"), "created")
    if created:
        try:
            t = datetime.datetime.strptime(created, "%Y-%m-%dT%H:%M:%SZ")
        except ValueError:
            t = None
        if t is None or t.strftime("%Y-%m-%dT%H:%M:%SZ") != created:
            raise bad("created %r is not YYYY-MM-DDThh:mm:ssZ" % created)
    if m.get("policy") is not None:
        policy = arr(m.get("policy"), "policy")
        if not policy:
            raise bad("policy is an empty array")
        for i, rule in enumerate(policy):
            if string(rule, "policy[%d]" % i) == "":
                raise bad("policy[%d] is empty" % i)

    r = obj(m.get("recipe"), "recipe", "recipe")
    eps = number(r.get("epsilon"), "recipe.epsilon")
    with np.errstate(over="ignore"):
        eps32 = np.float32(eps)
    if (string(r.get("method"), "recipe.method") != "absmean"
            or string(r.get("scale_rule"), "recipe.scale_rule") not in ("reciprocal", "quotient")
            or string(r.get("tie"), "recipe.tie") not in ("half-even", "half-away")
            or string(r.get("sum"), "recipe.sum") not in ("", "blocked16", "strided16", "sequential")
            or not eps > 0 or math.isinf(eps) or eps32 == 0 or np.isinf(eps32)):
        raise bad("recipe %r" % r)

    src = obj(m.get("source"), "source", "source")
    source_bytes = 0
    for i, f in enumerate(arr(src.get("files"), "source.files")):
        f = obj(f, "file", "source.files[%d]" % i)
        string(f.get("name"), "source.files[%d].name" % i)
        size = integer(f.get("bytes"), "source.files[%d].bytes" % i)
        if size < 0:
            raise bad("source.files[%d].bytes is %d" % (i, size))
        source_bytes += size
        hash_hex(f.get("blake3"), "source.files[%d].blake3" % i)
    meta = src.get("metadata")
    if meta is not None:
        if not isinstance(meta, dict) or not all(isinstance(v, str) for v in meta.values()):
            raise bad("source.metadata is not an object of strings")

    tensors = []
    names = set()
    for i, t in enumerate(arr(m.get("tensors"), "tensors")):
        t = parse_tensor(obj(t, "tensor", "tensors[%d]" % i), i)
        if t["name"] in names:
            raise bad("duplicate tensor name %r" % t["name"])
        names.add(t["name"])
        tensors.append(t)

    companions = []
    if m.get("companions") is not None:
        comps = arr(m.get("companions"), "companions")
        if not comps:
            raise bad("companions is an empty array")
        folded = set()
        for i, c in enumerate(comps):
            c = obj(c, "companion", "companions[%d]" % i)
            name = companion_name(string(c.get("name"), "companions[%d].name" % i))
            key = "".join(ch.lower() if "A" <= ch <= "Z" else ch for ch in name)
            if key in folded:
                raise bad("companion name %r repeats another, ASCII case ignored" % name)
            folded.add(key)
            companions.append({"name": name,
                               "section": parse_section(c.get("section"), "companion %r.section" % name)})

    totals = obj(m.get("totals"), "totals", "totals")
    want = {"tensors": len(tensors), "source_bytes": source_bytes}
    for k in ("ternary", "int8", "kept"):
        want.update({k + "_tensors": 0, k + "_params": 0, k + "_section_bytes": 0})
    for t in tensors:
        k = t["kind"]
        want[k + "_tensors"] += 1
        want[k + "_params"] += t["n"]
        want[k + "_section_bytes"] += sum(sec["length"] for _, sec in t["sections"])
    for k, v in want.items():
        if integer(totals.get(k), "totals." + k) != v:
            raise bad("totals.%s is %r, the tensors give %d" % (k, totals.get(k), v))
    number(totals.get("bits_per_ternary_weight"), "totals.bits_per_ternary_weight")
    return tensors, companions, r.get("sum") or ""  # "" reads as absent, as any zero value


def companion_name(name):
    """The name rules of "Companions"."""
    if (not name or len(name.encode("utf-8")) > 255 or name in (".", "..")
            or "/" in name or "\\" in name or any(ord(c) < 0x20 or ord(c) == 0x7F for c in name)):
        raise bad("companion name %r" % name)
    return name


def parse_section(v, path):
    sec = obj(v, "section", path)
    r = {"offset": integer(sec.get("offset"), path + ".offset"),
         "length": integer(sec.get("length"), path + ".length"),
         "blake3": hash_hex(sec.get("blake3"), path + ".blake3"),
         "chunks": [hash_hex(h, path + ".chunks") for h in arr(sec.get("chunks"), path + ".chunks")],
         "piece_cvs": [hash_hex(h, path + ".piece_cvs") for h in arr(sec.get("piece_cvs"), path + ".piece_cvs")]}
    if r["offset"] < 0 or r["length"] < 0:
        raise bad("%s: offset %d length %d" % (path, r["offset"], r["length"]))
    want = (r["length"] + CHUNK - 1) // CHUNK if r["length"] > CHUNK else 0
    if r["chunks"] and r["piece_cvs"]:
        raise bad("%s: both chunks and piece_cvs" % path)
    records = r["piece_cvs"] or r["chunks"]
    if len(records) != want:
        raise bad("%s: %d piece records for %d bytes, want %d" % (path, len(records), r["length"], want))
    return r


def group_size(gran, shape, n, p):
    """The group size G of "Granularity", or 0 for an empty tensor."""
    if len(shape) < 2:
        raise bad("%s: shape %r has fewer than 2 dimensions" % (p, shape))
    cols = n // shape[0] if shape[0] else 0
    if n == 0:
        return 0
    if gran == "tensor":
        return n
    if gran == "row":
        return cols
    if gran.startswith("group:"):
        text = gran[len("group:"):]
        if text.isdigit() and text == str(int(text)) and 1 <= int(text) <= 2147483647:
            if cols % int(text) != 0:
                raise bad("%s: %s does not divide the row length %d" % (p, gran, cols))
            return int(text)
    raise bad("%s: granularity %r" % (p, gran))


def parse_tensor(t, i):
    p = "tensors[%d]" % i
    name = string(t.get("name"), p + ".name")
    if name == "":
        raise bad(p + " has an empty name")
    p = "tensor %r" % name
    shape = [integer(d, p + ".shape") for d in arr(t.get("shape"), p + ".shape")]
    n = 1
    for d in shape:
        if d < 0:
            raise bad("%s: shape %r" % (p, shape))
        n *= max(d, 1)
    if n > INT64_MAX:  # the nonzero dimensions' product ("TENSOR")
        raise bad("%s: shape %r overflows" % (p, shape))
    if 0 in shape:
        n = 0
    source_dtype = string(t.get("source_dtype"), p + ".source_dtype")
    kind = string(t.get("kind"), p + ".kind")
    dtype = string(t.get("dtype"), p + ".dtype")
    codec = string(t.get("codec"), p + ".codec")
    gran = string(t.get("granularity"), p + ".granularity")
    sec = parse_section(t.get("section"), p + ".section")
    scales = None if t.get("scales") is None else parse_section(t.get("scales"), p + ".scales")
    exact = t.get("exact")
    if exact is not None and not isinstance(exact, bool):
        raise bad("%s: exact %r is not a boolean" % (p, exact))
    exact = bool(exact)
    span = t.get("source_span") is not None
    if span and t.get("source_blake3") is not None:
        raise bad("%s: both source_blake3 and source_span" % p)
    if span:
        hash_hex(t.get("source_span"), p + ".source_span")
    else:
        hash_hex(t.get("source_blake3"), p + ".source_blake3")
    scale = float32_of(t.get("scale"), p + ".scale")
    stats = t.get("stats")
    if stats is not None:
        for k, v in obj(stats, "stats", p + ".stats").items():
            number(v, p + ".stats." + k)
    length = sec["length"]
    counts, size = None, 0
    if kind == "ternary":
        if codec not in TRIT_CODECS:
            raise bad("%s: codec %r is not a trit codec" % (p, codec))
        lo, hi = payload_range(codec, n)
        if not lo <= length <= hi:
            raise bad("%s: section length %d, codec %s takes %d to %d" % (p, length, codec, lo, hi))
        if dtype or source_dtype not in FLOAT_DTYPES:
            raise bad("%s: dtype %r, source dtype %r" % (p, dtype, source_dtype))
        tr = t.get("trits")
        if tr is None:
            raise bad(p + ": no trit counts")
        tr = obj(tr, "trits", p + ".trits")
        counts = tuple(integer(tr.get(k), p + ".trits." + k) for k in ("neg", "zero", "pos"))
        if min(counts) < 0 or sum(counts) != n:
            raise bad("%s: trit counts %r do not sum to %d" % (p, counts, n))
        if stats is None:
            raise bad(p + ": no stats")
        size = group_size(gran, shape, n, p)
        if gran == "tensor":
            if scales is not None:
                raise bad(p + ": tensor granularity with a scales section")
            if not (scale > 0) or np.isinf(scale):
                raise bad("%s: scale %r" % (p, t.get("scale")))
        elif scale != 0 or scales is None:
            raise bad("%s: granularity %s needs a scales section and no scale" % (p, gran))
    elif kind == "int8":
        if codec != "raw" or length != n:
            raise bad("%s: int8 tensor with codec %r, section length %d for %d codes" % (p, codec, length, n))
        if gran != "row":
            raise bad("%s: int8 tensor with granularity %r" % (p, gran))
        if source_dtype not in FLOAT_DTYPES or dtype or scale != 0 or exact or t.get("trits") is not None:
            raise bad(p + ": int8 tensor with kept or ternary fields")
        if stats is None or scales is None:
            raise bad(p + ": int8 tensor without stats or scales")
        size = group_size(gran, shape, n, p)
    elif kind == "kept":
        if codec != "raw":
            raise bad("%s: kept tensor with codec %r" % (p, codec))
        if dtype == "":
            raise bad(p + ": kept tensor without dtype")
        if scale != 0 or exact or gran or scales is not None or t.get("trits") is not None:
            raise bad(p + ": kept tensor with ternary fields")
        if dtype != source_dtype and (dtype not in CONVERTED_TO or source_dtype not in FLOAT_DTYPES):
            raise bad("%s: kept tensor converted from %r to %r" % (p, source_dtype, dtype))
        if (stats is not None) != (dtype != source_dtype):
            raise bad(p + ": stats are required exactly when the dtype changes")
        if dtype in DTYPE_SIZE:
            if length != n * DTYPE_SIZE[dtype]:
                raise bad("%s: section length %d for %d %s elements" % (p, length, n, dtype))
        elif (n == 0) != (length == 0):
            raise bad("%s: section length %d for %d elements of unknown dtype %r" % (p, length, n, dtype))
    else:
        raise bad("%s: kind %r" % (p, kind))
    if scales is not None:
        groups = n // size if size else 0
        if scales["length"] != 4 * groups:
            raise bad("%s: scales length %d for %d scales" % (p, scales["length"], groups))
    secs = [("payload", sec)] + ([("scales", scales)] if scales is not None else [])
    return {"name": name, "shape": shape, "n": n, "dtype": dtype, "kind": kind, "codec": codec,
            "granularity": gran, "exact": exact, "scale": scale, "group": size,
            "sections": secs, "counts": counts, "span": span}


def payload_range(codec, n):
    b = (n + 4) // 5
    if codec == "bits2":
        return (n + 3) // 4, (n + 3) // 4
    if codec == "base3":
        return b, b
    blocks = max(1, (b + 131071) // 131072)
    return 9, 13 + 3 * blocks + b


def sections(tensors):
    """The sections in file order, as (tensor, role, section): each
    tensor's "payload", then its "scales" if it has them."""
    return [(t, role, s) for t in tensors for role, s in t["sections"]]


# ---- codecs -------------------------------------------------------------

TRIT_OF_CODE = np.array([0, 1, -1, 0], dtype=np.int8)


def decode_bits2(p, n):
    if len(p) != (n + 3) // 4:
        raise Reject("payload", "bits2 payload of %d bytes for %d trits" % (len(p), n))
    codes = ((p[:, None] >> np.array([0, 2, 4, 6], dtype=np.uint8)) & 3).reshape(-1)
    if (codes == 3).any():
        j = int(np.flatnonzero(codes == 3)[0]) // 4
        raise Reject("payload", "bits2 byte %d is 0x%02x (code 3)" % (j, p[j]))
    if codes[n:].any():
        raise Reject("payload", "bits2 padding pairs of the last byte are not 0")
    return TRIT_OF_CODE[codes[:n]]


def decode_base3(p, n):
    if len(p) != (n + 4) // 5:
        raise Reject("payload", "base3 payload of %d bytes for %d trits" % (len(p), n))
    if (p > 242).any():
        j = int(np.flatnonzero(p > 242)[0])
        raise Reject("payload", "base3 byte %d is %d" % (j, p[j]))
    digits = ((p[:, None] // np.array([1, 3, 9, 27, 81], dtype=np.uint8)) % 3).reshape(-1)
    if digits[n:].any():
        raise Reject("payload", "base3 last byte has nonzero digits past the tensor")
    return TRIT_OF_CODE[digits[:n]]


def check_frame(p, b):
    """The entropy frame rules of FORMAT.md, before decoding anything."""
    def no(detail):
        return Reject("payload", "entropy frame: " + detail)

    if len(p) < 9:
        raise no("%d bytes" % len(p))
    if p[:4] != b"\x28\xb5\x2f\xfd":
        raise no("magic %s" % p[:4].hex())
    fhd = p[4]
    if not fhd & 0x20 or fhd & 0x1F:
        raise no("descriptor 0x%02x" % fhd)
    width = (1, 2, 4, 8)[fhd >> 6]
    if len(p) < 5 + width + 3:
        raise no("truncated in its header")
    size = int.from_bytes(p[5:5 + width], "little") + (256 if width == 2 else 0)
    if size != b:
        raise no("content size %d, the base3 payload is %d bytes" % (size, b))
    off, stored = 5 + width, 0
    while True:
        if len(p) - off < 3:
            raise no("truncated before a block header")
        h = int.from_bytes(p[off:off + 3], "little")
        last, typ, bsize = h & 1, (h >> 1) & 3, h >> 3
        if typ == 3:
            raise no("reserved block type")
        if bsize > 131072:
            raise no("block size %d" % bsize)
        body = 1 if typ == 1 else bsize
        if typ in (0, 1):
            stored += bsize
            if stored > size:
                raise no("blocks hold more than the content size")
        off += 3
        if len(p) - off < body:
            raise no("truncated block")
        off += body
        if last:
            break
    if off != len(p):
        raise no("%d bytes after the frame" % (len(p) - off))


def decode_entropy(p, n):
    b = (n + 4) // 5
    check_frame(bytes(p), b)
    out = subprocess.run(["zstd", "-d", "-q", "-c"], input=bytes(p), capture_output=True)
    if out.returncode != 0:
        raise Reject("payload", "entropy frame: zstd: " + out.stderr.decode(errors="replace").strip())
    if len(out.stdout) != b:
        raise Reject("payload", "entropy frame decodes to %d bytes, want %d" % (len(out.stdout), b))
    return decode_base3(np.frombuffer(out.stdout, dtype=np.uint8), n)


DECODERS = {"bits2": decode_bits2, "base3": decode_base3, "entropy": decode_entropy}


# ---- the file -----------------------------------------------------------

def align_up(x):
    return (x + ALIGN - 1) // ALIGN * ALIGN


def read_artifact(data, with_trits):
    size = len(data)
    if size < PREAMBLE_LEN + TRAILER_LEN:
        raise Reject("structure", "%d bytes is too short" % size)
    if data[0:8] != MAGIC:
        raise Reject("not-artifact", "magic %s" % data[0:8].hex())
    major, minor, flags = struct.unpack_from("<HHI", data, 8)
    if major != 1:
        raise Reject("version", "major version %d" % major)
    if minor > READER_MINOR:
        raise Reject("version", "minor version %d" % minor)
    if flags != 0 or any(data[16:64]):
        raise Reject("structure", "preamble flags or reserved bytes are set")

    tr = data[size - TRAILER_LEN:]
    if tr[56:64] != TRAILER_MAGIC or any(tr[48:56]):
        raise Reject("structure", "trailer magic or reserved bytes")
    m_off, m_len = struct.unpack_from("<QQ", tr, 0)
    if m_off < PREAMBLE_LEN or m_off % ALIGN or m_off > size - TRAILER_LEN:
        raise Reject("structure", "manifest offset %d" % m_off)
    if m_off + m_len != size - TRAILER_LEN:
        raise Reject("structure", "manifest length %d does not reach the trailer" % m_len)
    if m_len > MANIFEST_LIMIT:
        raise Reject("structure", "manifest length %d over the limit" % m_len)
    body = data[m_off:m_off + m_len]
    if blake3_hex(body) != tr[16:48].hex():
        raise Reject("manifest-hash", "manifest BLAKE3 differs from the trailer's")

    tensors, companions, sum_order = parse_manifest(body)
    used = max([CODEC_SINCE[t["codec"]] for t in tensors], default=0)
    if sum_order:
        used = max(used, SUM_KEY_SINCE)
    if sum_order == "blocked16":
        used = max(used, BLOCKED_SUM_SINCE)
    if companions:
        used = max(used, COMPANIONS_SINCE)
    if any(t["span"] for t in tensors):
        used = max(used, SOURCE_SPAN_SINCE)
    all_secs = [s for _, _, s in sections(tensors)] + [c["section"] for c in companions]
    if MANIFEST_MINOR is not None or any(s["piece_cvs"] for s in all_secs):
        used = max(used, MINOR_KEY_SINCE)
    if used > minor:
        raise Reject("version", "codecs or keys of format 1.%d in a file of 1.%d" % (used, minor))
    if minor >= MINOR_KEY_SINCE:
        if MANIFEST_MINOR != minor:
            raise Reject("manifest", "file says 1.%d, its manifest's minor key is %r" % (minor, MANIFEST_MINOR))
        if any(s["chunks"] for s in all_secs):
            raise Reject("manifest", "chunk hashes in a file of 1.%d" % minor)
        if any(t["span"] for t in tensors) and not all(t["span"] for t in tensors):
            raise Reject("manifest", "some tensors record source_span, others source_blake3 (one kind for all)")
    elif minor != used:
        raise Reject("structure", "file says 1.%d, its manifest uses 1.%d" % (minor, used))

    secs = sections(tensors)
    secs += [({"name": c["name"], "kind": "companion"}, "companion", c["section"]) for c in companions]
    nxt = PREAMBLE_LEN
    for t, _, s in secs:
        if s["offset"] != nxt:
            raise Reject("structure", "tensor %r: section at %d, layout puts it at %d" % (t["name"], s["offset"], nxt))
        if s["length"] > m_off - nxt:
            raise Reject("structure", "tensor %r: section runs past the manifest" % t["name"])
        nxt = align_up(s["offset"] + s["length"])
    if nxt != m_off:
        raise Reject("structure", "manifest at %d, layout puts it at %d" % (m_off, nxt))

    out, parts, comps = [], {}, []
    for i, (t, role, s) in enumerate(secs):
        end = s["offset"] + s["length"]
        pad_to = secs[i + 1][2]["offset"] if i + 1 < len(secs) else m_off
        if any(data[end:pad_to]):
            raise Reject("structure", "nonzero padding after tensor %r's %s" % (t["name"], role))
        section = data[s["offset"]:end]
        if s["piece_cvs"]:
            cvs, joined = b3_section_pieces(section)
            for k, want in enumerate(s["piece_cvs"]):
                if cvs[k] != want:
                    raise Reject("section-hash", "tensor %r: %s piece %d (bytes %d..%d) chaining value differs"
                                 % (t["name"], role, k, k * CHUNK, min((k + 1) * CHUNK, len(section))))
            if joined != s["blake3"]:
                raise Reject("section-hash", "tensor %r: %s section BLAKE3 differs" % (t["name"], role))
        elif blake3_hex(section) != s["blake3"]:
            raise Reject("section-hash", "tensor %r: %s section BLAKE3 differs" % (t["name"], role))
        for k, want in enumerate(s["chunks"]):
            if blake3_hex(section[k * CHUNK:(k + 1) * CHUNK]) != want:
                raise Reject("section-hash", "tensor %r: %s chunk %d BLAKE3 differs" % (t["name"], role, k))
        if role == "companion":
            comps.append({"name": t["name"], "length": len(section),
                          "sha256": hashlib.sha256(section).hexdigest()})
            continue
        parts[role] = check_contents(t, role, np.frombuffer(section, dtype=np.uint8))
        if i + 1 == len(secs) or secs[i + 1][0] is not t:  # the tensor's last section
            out.append(describe_tensor(t, parts, with_trits))
            parts = {}
    if not secs and any(data[PREAMBLE_LEN:m_off]):
        raise Reject("structure", "nonzero padding before the manifest")
    return "1.%d" % minor, out, comps


def check_contents(t, role, p):
    """A section's contents decoded and checked ("Codecs", "Scales
    sections"): trits counted, int8 codes, scale values."""
    if role == "scales":
        scales = p.view("<f4").astype(np.float32)
        if t["kind"] == "ternary":
            ok = np.isfinite(scales) & (scales > 0)
        else:
            ok = np.isfinite(scales) & (scales >= 0)
        if not ok.all():
            j = int(np.flatnonzero(~ok)[0])
            raise Reject("payload", "tensor %r: %s scale %d is %r" % (t["name"], t["kind"], j, float(scales[j])))
        return scales
    if t["kind"] == "ternary":
        trits = DECODERS[t["codec"]](p, t["n"])
        counts = tuple(int((trits == v).sum()) for v in (-1, 0, 1))
        if counts != t["counts"]:
            raise Reject("counts", "tensor %r: decoded counts %r, manifest %r" % (t["name"], counts, t["counts"]))
        return trits
    if t["kind"] == "int8":
        codes = p.view(np.int8)
        if (codes == -128).any():
            raise Reject("payload", "tensor %r: int8 code %d is -128" % (t["name"], int(np.flatnonzero(codes == -128)[0])))
        return codes
    return p


# F8_E4M3: 1 sign, 4 exponent bits (bias 7), 3 fraction bits, no
# infinities, S.1111.111 NaN, exponent 0 the subnormals m × 2^-9.
def _e4m3(b):
    sign = -1.0 if b & 0x80 else 1.0
    e, m = (b >> 3) & 0xF, b & 7
    if e == 0xF and m == 7:
        return float("nan")
    if e == 0:
        return sign * m * 2.0 ** -9
    return sign * (1 + m / 8) * 2.0 ** (e - 7)


E4M3 = np.array([_e4m3(b) for b in range(256)], dtype=np.float32)


def decode_floats(dtype, raw):
    """Kept bytes of a float dtype as float32 ("raw")."""
    with np.errstate(over="ignore", invalid="ignore"):
        if dtype == "F64":
            return raw.view("<f8").astype(np.float32)
        if dtype == "F32":
            return raw.view("<f4").astype(np.float32)
        if dtype == "F16":
            return raw.view("<f2").astype(np.float32)
        if dtype == "BF16":
            return (raw.view("<u2").astype(np.uint32) << 16).view(np.float32)
        if dtype == "F8_E5M2":
            return (raw.astype(np.uint16) << 8).view(np.float16).astype(np.float32)
        if dtype == "F8_E4M3":
            return E4M3[raw]
    return None


def float32_digest(v):
    bits = np.asarray(v, dtype="<f4").view("<u4").copy()
    bits[np.isnan(np.asarray(v, dtype=np.float32))] = 0x7FC00000
    return hashlib.sha256(bits.tobytes()).hexdigest()


def describe_tensor(t, parts, with_trits):
    p = parts["payload"]
    r = {"name": t["name"], "kind": t["kind"], "codec": t["codec"], "shape": t["shape"]}
    if t["kind"] == "kept":
        raw = p.tobytes()
        r["dtype"] = t["dtype"]
        r["kept_sha256"] = hashlib.sha256(raw).hexdigest()
        values = decode_floats(t["dtype"], p)
        if values is not None:
            r["float32_sha256"] = float32_digest(values)
        if with_trits:
            r["hex"] = raw.hex()
        return r
    r["granularity"] = t["granularity"]
    if t["exact"]:
        r["exact"] = True
    if "scales" in parts:
        scales = parts["scales"]
    else:
        scales = np.array([t["scale"]], dtype=np.float32)
        r["scale"] = float(t["scale"])
    group = np.arange(t["n"]) // t["group"] if t["n"] else np.zeros(0, dtype=np.int64)
    values = (scales[group] * p.astype(np.float32)).astype("<f4")
    r["float32_sha256"] = float32_digest(values)
    if t["kind"] == "ternary":
        r["counts"] = list(t["counts"])
        r["trits_sha256"] = hashlib.sha256(p.astype(np.int8).tobytes()).hexdigest()
        if with_trits:
            r["trits"] = "".join("-0+"[v + 1] for v in p.tolist())
    else:
        r["codes_sha256"] = hashlib.sha256(p.tobytes()).hexdigest()
        if with_trits:
            r["hex"] = p.tobytes().hex()
    if with_trits and "scales" in parts:
        r["scales"] = [float(v) for v in scales]
    return r


def main(argv):
    if argv[:1] == ["--blake3"]:
        out = []
        for path in argv[1:]:
            with open(path, "rb") as f:
                data = f.read()
            r = {"file": path, "blake3": b3_hash(data)}
            if len(data) > CHUNK:
                r["piece_cvs"], r["joined"] = b3_section_pieces(data)
            out.append(r)
        json.dump(out, sys.stdout, indent=1)
        print()
        return 0
    with_trits = "--trits" in argv
    files = [a for a in argv if a != "--trits"]
    if not files or any(a.startswith("-") for a in files):
        print(__doc__, file=sys.stderr)
        return 2
    results = []
    for path in files:
        with open(path, "rb") as f:
            data = f.read()
        try:
            version, tensors, comps = read_artifact(data, with_trits)
            r = {"file": path, "result": "ok", "version": version, "tensors": tensors}
            if comps:
                r["companions"] = comps
            results.append(r)
        except Reject as e:
            results.append({"file": path, "result": e.cls, "detail": str(e)})
    json.dump(results, sys.stdout, indent=1)
    print()
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
