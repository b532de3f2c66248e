#!/usr/bin/env bash
# What an ensemble costs: runs `slowfield demo` (PINN with its ensemble, grid
# tomography with its ensemble, the comparison, the report) under /usr/bin/time and
# writes the wall time of every stage, members per minute of each method side by side
# (and their ratio), and the peak memory to experiments/results/ensemble_cost.md.
#
#   experiments/ensemble_cost.sh [DEMO_ARGS...]     e.g. --ensemble 8
#
# Set SLOWFIELD_BIN to a built binary to skip `cargo build`.
set -euo pipefail
cd "$(dirname "$0")/.."
bin=${SLOWFIELD_BIN:-}
if [ -z "$bin" ]; then
    cargo build --release -q
    bin=${CARGO_TARGET_DIR:-target}/release/slowfield
fi
out=$(mktemp -d)
trap 'rm -rf "$out"' EXIT
/usr/bin/time -v "$bin" demo -o "$out/demo" "$@" > "$out/log" 2> "$out/time" || { cat "$out/time"; exit 1; }
mkdir -p experiments/results
python3 - "$out" "$*" > experiments/results/ensemble_cost.md <<'PY'
import json, re, sys, platform, os, datetime
out, args = sys.argv[1], sys.argv[2]
t = open(f"{out}/time").read()
wall = re.search(r"Elapsed \(wall clock\) time.*: (.*)", t).group(1)
rss = int(re.search(r"Maximum resident set size \(kbytes\): (\d+)", t).group(1)) / 1024
html = open(f"{out}/demo/report.html").read()
print(f"# Ensemble cost: `slowfield demo {args}`\n")
print(f"{datetime.date.today()}, {os.cpu_count()} cores, {platform.processor() or platform.machine()}; "
      f"`experiments/ensemble_cost.sh {args}`\n")
print(f"Whole demo: {wall} wall, {rss:.0f} MB peak.\n")
print("| stage | seconds |\n|---|---|")
for name, s in re.findall(r"<tr><td>([^<]+)</td><td class=\"n\">([\d.]+)</td></tr>", html):
    print(f"| {name} | {s} |")
print("\n| method | members | start | at once | ensemble s | members / min | spread in coverage (median) | mean model χ² |\n|---|---|---|---|---|---|---|---|")
rate = {}
for m in ("pinn", "grid"):
    e = json.load(open(f"{out}/demo/{m}/report.json")).get("ensemble")
    if not e:
        continue
    rate[m] = e["members_per_minute"]
    print(f"| {m} | {e['members']} | {e['start']} | {e['parallel']} | {e['seconds']:.1f} | {e['members_per_minute']:.2f} | "
          f"{e['spread_covered_median_mps']:.0f} m/s ({e['spread_covered_median_pct']:.1f} %) | {e['mean_judge']['chi2']:.2f} |")
if len(rate) == 2:
    print(f"\nGrid tomography runs {rate['grid'] / rate['pinn']:.0f}× as many members a minute as the PINN.")
PY
cat experiments/results/ensemble_cost.md
