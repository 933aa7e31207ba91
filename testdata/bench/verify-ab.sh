#!/usr/bin/env bash
# verify with no source, two builds against each other and against b3sum:
# alternating OLD, NEW and b3sum on the same artifact RUNS times, prints
# median wall, user and sys seconds and the fastest wall (wall from a
# monotonic clock, user and
# sys from the children's resource usage, both at microsecond resolution)
# and the ratios to b3sum. The file is read once first, to be in the page
# cache. On a shared machine the fastest run is the one least disturbed.
#
# usage: testdata/bench/verify-ab.sh OLD_BINARY NEW_BINARY ARTIFACT [RUNS]   (default 7)
#   build OLD from a worktree of the commit to compare with:
#   git worktree add /tmp/old-tree COMMIT && (cd /tmp/old-tree && go build -o /tmp/old ./cmd/ternkit)
# needs: b3sum, /usr/bin/python3.
set -euo pipefail
old=$1 new=$2 art=$3 runs=${4:-7}
b3sum --no-names "$art" >/dev/null
python3 - "$old" "$new" "$art" "$runs" <<'PY'
import os, resource, statistics, subprocess, sys, time
old, new, art, runs = sys.argv[1], sys.argv[2], sys.argv[3], int(sys.argv[4])
cmds = {"old": [old, "verify", art, "-q"], "new": [new, "verify", art, "-q"],
        "b3sum": ["b3sum", "--no-names", art]}
rows = {k: [] for k in cmds}
for _ in range(runs):
    for name, cmd in cmds.items():
        r0 = resource.getrusage(resource.RUSAGE_CHILDREN)
        t0 = time.monotonic()
        subprocess.run(cmd, check=True, stdout=subprocess.DEVNULL)
        wall = time.monotonic() - t0
        r1 = resource.getrusage(resource.RUSAGE_CHILDREN)
        rows[name].append((wall, r1.ru_utime - r0.ru_utime, r1.ru_stime - r0.ru_stime))
med = {k: [statistics.median(r[i] for r in v) for i in range(3)] for k, v in rows.items()}
print(f"{art}: {os.path.getsize(art) / 1e6:.0f} MB, {runs} runs each, medians")
fast = {k: min(r[0] for r in v) for k, v in rows.items()}
print("| command | wall s | fastest s | user s | sys s | wall / b3sum | fastest / b3sum |")
print("|---|---|---|---|---|---|---|")
for k in cmds:
    w, u, s = med[k]
    print(f"| {k} | {w:.3f} | {fast[k]:.3f} | {u:.3f} | {s:.3f} | {w / med['b3sum'][0]:.2f} | {fast[k] / fast['b3sum']:.2f} |")
print(f"new / old: wall {med['new'][0] / med['old'][0]:.2f}, fastest {fast['new'] / fast['old']:.2f}, "
      f"cpu (user+sys) {(med['new'][1] + med['new'][2]) / (med['old'][1] + med['old'][2]):.2f}")
PY
