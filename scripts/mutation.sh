#!/usr/bin/env bash
# Mutation testing: plants one small bug (a mutant: a flipped comparison, a
# changed operator, a negated condition) at a time in a package and runs
# that package's tests; a mutant that leaves them green "lived" and points
# at a promise no test guards. Uses github.com/go-gremlins/gremlins,
# installed into a temporary directory (not a module dependency).
#
#   scripts/mutation.sh [PACKAGE...]   default: verify manifest pack convert
#
# convert is limited to its quantization code (absmean, int8, kernels,
# statistics, granularity, bounds). Not run by CI: on a 2-core machine
# verify alone takes about half an hour. Results go to $MUTATION_OUT
# (default: a temporary directory, printed), one log and one JSON file per
# package, and a summary line per package: killed, lived, timed out, not
# covered and the efficacy (killed / (killed + lived)).
#
# Environment: GREMLINS_VERSION (v0.6.0), WORKERS (1), TIMEOUT_COEFFICIENT
# (10: the time a mutant's test run may take is this many times the
# package's unmutated run, build included; lower it only on an idle
# machine). Do not pass gremlins' --test-cpu: v0.6.0 hands "-cpu N" to go
# test as one argument, go test refuses it, and every mutant counts as
# killed.
set -euo pipefail
cd "$(dirname "$0")/.."
version=${GREMLINS_VERSION:-v0.6.0}
out=${MUTATION_OUT:-$(mktemp -d "${TMPDIR:-/tmp}/ternkit-mutation-XXXXXX")}
mkdir -p "$out"
gobin=$(mktemp -d "${TMPDIR:-/tmp}/ternkit-gremlins-XXXXXX")
trap 'rm -rf "$gobin"' EXIT
GOBIN=$gobin GOFLAGS=-mod=mod go install "github.com/go-gremlins/gremlins/cmd/gremlins@$version"

pkgs=("$@")
[ ${#pkgs[@]} -gt 0 ] || pkgs=(verify manifest pack convert)

# convert's files outside the quantization code
convert_excludes=()
for f in convert/*.go; do
	case $(basename "$f") in
	*_test.go | absmean.go | int8.go | kernels*.go | stats.go | granularity.go | bound*.go) ;;
	*) convert_excludes+=(-E "$(basename "$f" | sed 's/\./\\./g')\$") ;;
	esac
done

for p in "${pkgs[@]}"; do
	p=${p#./}
	p=${p%/}
	excludes=()
	[ "$p" = convert ] && excludes=("${convert_excludes[@]}")
	echo "== $p" >&2
	# -count=1: the unmutated run that sets the timeouts must not come
	# from the test cache, or every timeout is a fraction of a second
	GOFLAGS=-count=1 nice -n 10 "$gobin/gremlins" unleash \
		--workers "${WORKERS:-1}" \
		--timeout-coefficient "${TIMEOUT_COEFFICIENT:-10}" \
		-o "$out/$p.json" "${excludes[@]}" "./$p" >"$out/$p.log" 2>&1 || true
	grep -E 'LIVED|TIMED OUT' "$out/$p.log" >&2 || true
	killed=$(grep -c '^ *KILLED' "$out/$p.log" || true)
	lived=$(grep -c '^ *LIVED' "$out/$p.log" || true)
	timed=$(grep -c '^ *TIMED OUT' "$out/$p.log" || true)
	uncovered=$(grep -c '^ *NOT COVERED' "$out/$p.log" || true)
	efficacy=n/a
	[ $((killed + lived)) -gt 0 ] && efficacy=$(awk -v k="$killed" -v l="$lived" 'BEGIN { printf "%.1f%%", 100 * k / (k + l) }')
	printf '%-9s killed %4d  lived %3d  timed out %3d  not covered %3d  efficacy %s\n' \
		"$p" "$killed" "$lived" "$timed" "$uncovered" "$efficacy"
done
echo "logs and JSON in $out" >&2
