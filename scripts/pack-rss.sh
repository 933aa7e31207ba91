#!/usr/bin/env bash
# Peak memory of `ternkit pack` as the checkpoint grows: generates a BF16
# checkpoint of SIZE bytes and one of twice that (same layer shapes, twice
# the layers), packs each with /usr/bin/time -v, and prints both peak RSS
# figures and their ratio. Reading streams tensor by tensor, so the ratio
# should stay near 1.
#
#   scripts/pack-rss.sh [SIZE] [SHARDS]     default: 1.5e9 bytes, 1 file
#
# Needs about 3 × SIZE of free disk in $TMPDIR; everything is removed after.
set -euo pipefail
cd "$(dirname "$0")/.."
size=${1:-1.5e9}
shards=${2:-1}
work=$(mktemp -d "${TMPDIR:-/tmp}/ternkit-rss-XXXXXX")
trap 'rm -rf "$work"' EXIT

go build -o "$work/ternkit" ./cmd/ternkit
go build -o "$work/synthcheckpoint" ./cmd/synthcheckpoint

log="$work/time.log"
peak() { # packs $1; prints its peak RSS in KiB, leaves the full report in $log
	if ! /usr/bin/time -v -o "$log" "$work/ternkit" pack "$1" -o "$work/out.tkart" >/dev/null 2>"$work/pack.err"; then
		cat "$work/pack.err" >&2
		exit 1
	fi
	rm -f "$work/out.tkart"
	awk -F': ' '/Maximum resident set size/ {print $2}' "$log"
}

declare -a rss
for factor in 1 2; do
	target=$(awk -v s="$size" -v f="$factor" 'BEGIN {printf "%.0f", s * f}')
	src="$work/src-$factor"
	[ "$shards" -gt 1 ] || src="$src.safetensors"
	"$work/synthcheckpoint" -size "$target" -shards "$shards" -o "$src" >/dev/null
	bytes=$(du -sb "$src" | cut -f1)
	kib=$(peak "$src")
	rss+=("$kib")
	elapsed=$(awk -F'): ' '/Elapsed \(wall clock\)/ {print $2}' "$log")
	printf 'checkpoint %6.2f GB: peak RSS %7.1f MiB, pack took %s\n' \
		"$(awk -v b="$bytes" 'BEGIN {print b / 1e9}')" "$(awk -v k="$kib" 'BEGIN {print k / 1024}')" "$elapsed"
	rm -rf "$src"
done
awk -v a="${rss[0]}" -v b="${rss[1]}" 'BEGIN {printf "peak RSS ratio (2x checkpoint / 1x): %.3f\n", b / a}'
