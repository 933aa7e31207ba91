#!/usr/bin/env bash
# The packing benchmark: generates a transformer-shaped BF16 checkpoint and,
# in one run, alternating, measures ternkit pack, b3sum of the source,
# ternkit verify, b3sum of the artifact, ternkit verify --against, and a
# plain numpy ternarizer and the same in torch (the peers), each RUNS
# times; prints medians, peak RSS (/usr/bin/time -v) and the ratios the
# performance goals are stated in.
#
# Two more rows tell what the disk costs: pack writing its artifact to
# tmpfs (/dev/shm) instead of the disk, and dd writing as many bytes as the
# artifact has to the disk with fsync (the floor for any tool that writes
# the artifact durably).
#
# usage: testdata/bench/run.sh [SIZE_BYTES] [RUNS] [SHAPE]   (default 1.5e9, 3, mid)
#   SHAPE mid:  hidden 2048, MLP 5632, vocabulary 32000 (a 1-3B model's layers)
#   SHAPE wide: hidden 8192, MLP 21824, vocabulary 32000 (a 70B model's layer
#               widths; 4.27e9 gives 2 layers)
# needs: go, b3sum, /usr/bin/time (Debian package time), /usr/bin/python3
# with numpy and torch (python3-numpy, python3-torch); about 3 × SIZE of
# free space in $TMPDIR.
set -euo pipefail
cd "$(dirname "$0")/../.."
size=${1:-1.5e9}
runs=${2:-3}
shape=${3:-mid}
case "$shape" in
  mid) dims="-hidden 2048 -ffn 5632 -vocab 32000" ;;
  wide) dims="-hidden 8192 -ffn 21824 -vocab 32000" ;;
  *) echo "unknown shape $shape (mid or wide)" >&2; exit 2 ;;
esac
work=${TMPDIR:-/tmp}/ternkit-bench
mkdir -p "$work"
go build -o "$work/ternkit" ./cmd/ternkit
go build -o "$work/synthcheckpoint" ./cmd/synthcheckpoint
src="$work/model-$shape-$size.safetensors"
art="$work/model-$shape-$size.tkart"
# shellcheck disable=SC2086
[ -f "$src" ] || "$work/synthcheckpoint" -size "$size" $dims -o "$src"
"$work/ternkit" pack "$src" -o "$art" -q >/dev/null 2>&1   # warm the page cache

shm=/dev/shm/ternkit-bench.tkart
blocks=$(( ($(stat -c %s "$art") + (1 << 20) - 1) >> 20 ))
trap 'rm -f "$shm" "$work/floor.bin"' EXIT

results="$work/results.txt"
: > "$results"
measure() { # name command...
  local name=$1; shift
  /usr/bin/time -v -o "$work/time.txt" "$@" >/dev/null 2>"$work/stderr.txt" || { cat "$work/stderr.txt"; exit 1; }
  local wall rss
  wall=$(sed -n 's/.*Elapsed (wall clock) time (h:mm:ss or m:ss): //p' "$work/time.txt")
  rss=$(sed -n 's/.*Maximum resident set size (kbytes): //p' "$work/time.txt")
  echo "$name $wall $rss" >> "$results"
}
for r in $(seq "$runs"); do
  echo "run $r of $runs" >&2
  measure b3sum_source b3sum --no-names "$src"
  # every writer writes a new file: freeing the previous run's blocks
  # (which a rename over it, or a truncation, does on the spot) is not the
  # work being measured
  rm -f "$art"; sync
  measure pack "$work/ternkit" pack "$src" -o "$art" -q --codec bits2
  rm -f "$shm"
  measure pack_tmpfs "$work/ternkit" pack "$src" -o "$shm" -q --codec bits2
  rm -f "$work/floor.bin"; sync
  measure write_floor dd if=/dev/zero of="$work/floor.bin" bs=1M count="$blocks" conv=fsync status=none
  # pack writes past the page cache where it can: read the artifact
  # once so that b3sum and verify both find it warm
  cat "$art" > /dev/null
  measure b3sum_artifact b3sum --no-names "$art"
  measure verify "$work/ternkit" verify "$art" -q
  measure verify_against "$work/ternkit" verify "$art" --against "$src" -q
  rm -f "$work/peer.out"; sync
  measure numpy_peer /usr/bin/python3 testdata/bench/numpy_ternarize.py "$src" "$work/peer.out"
  rm -f "$work/peer.out"; sync
  measure torch_peer /usr/bin/python3 testdata/bench/torch_ternarize.py "$src" "$work/peer.out"
done

/usr/bin/python3 - "$results" "$src" "$art" "$shape" <<'PY'
import os, statistics, sys
rows = {}
for line in open(sys.argv[1]):
    name, wall, rss = line.split()
    parts = [float(p) for p in wall.split(":")]
    secs = sum(p * 60 ** i for i, p in enumerate(reversed(parts)))
    rows.setdefault(name, []).append((secs, int(rss)))
med = {k: statistics.median(s for s, _ in v) for k, v in rows.items()}
rss = {k: max(r for _, r in v) for k, v in rows.items()}
print(f"source {os.path.getsize(sys.argv[2]) / 1e9:.2f} GB, artifact {os.path.getsize(sys.argv[3]) / 1e9:.3f} GB, "
      f"shape {sys.argv[4]}, {len(next(iter(rows.values())))} runs, {os.cpu_count()} CPUs")
print()
print("| command | median s | peak RSS MiB |")
print("|---|---|---|")
for k in ["pack", "pack_tmpfs", "write_floor", "b3sum_source", "verify", "b3sum_artifact", "verify_against", "numpy_peer", "torch_peer"]:
    print(f"| {k} | {med[k]:.2f} | {rss[k] / 1024:.0f} |")
print()
print("| ratio | value | goal |")
print("|---|---|---|")
print(f"| pack / b3sum source | {med['pack'] / med['b3sum_source']:.2f} | <= 3 |")
print(f"| pack to tmpfs / b3sum source | {med['pack_tmpfs'] / med['b3sum_source']:.2f} | (the same, without the disk) |")
print(f"| numpy peer / pack | {med['numpy_peer'] / med['pack']:.2f} | |")
print(f"| torch peer / pack | {med['torch_peer'] / med['pack']:.2f} | |")
print(f"| fastest peer / pack | {min(med['numpy_peer'], med['torch_peer']) / med['pack']:.2f} | >= 6 (mid) |")
print(f"| verify / b3sum artifact | {med['verify'] / med['b3sum_artifact']:.2f} | <= 1.5 |")
print(f"| verify --against / b3sum source | {med['verify_against'] / med['b3sum_source']:.2f} | <= 3 |")
print(f"| pack peak RSS MiB | {rss['pack'] / 1024:.0f} | <= 768 |")
PY
