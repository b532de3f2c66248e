#!/usr/bin/env bash
# `slowfield compare` with its defaults (pinn, pinn-refined, grid-smoothness) on every
# site of the site suite and on the demo, each against its true model; the tables are
# gathered into OUT/tables.md.
#
#   experiments/compare_sites.sh [OUT] [case …]      (OUT default: target/compare_sites)
#
# The sites' picks and true models are written by the site suite's --export (the same
# synthetic picks, seed 7, as its own runs); the demo uses the shipped files.
set -euo pipefail
cd "$(dirname "$0")/.."
out=${1:-target/compare_sites}
shift || true
# SLOWFIELD_BIN=DIR: the slowfield and site_suite binaries already built there (so
# that a build going on beside the run does not change them under it)
if [ -z "${SLOWFIELD_BIN:-}" ]; then
  cargo build --release --quiet --example site_suite
  cargo build --release --quiet
  target=${CARGO_TARGET_DIR:-target}
  SLOWFIELD_BIN=$(mktemp -d)
  cp "$target/release/slowfield" "$target/release/examples/site_suite" "$SLOWFIELD_BIN/"
fi
"$SLOWFIELD_BIN/site_suite" --export "$out/sites" "$@"
: > "$out/tables.md"
for d in "$out"/sites/*/; do
  case=$(basename "$d")
  echo "== $case" >&2
  /usr/bin/time -f "%e s wall, %M kB peak" -o "$out/$case.time" \
    "$SLOWFIELD_BIN/slowfield" compare "$d/picks.csv" --truth "$d/true-model.csv" \
    -o "$out/$case" > "$out/$case.txt"
  { echo "### $case ($(cat "$out/$case.time"))"; echo; echo '```'; cat "$out/$case.txt"; echo '```'; echo; } >> "$out/tables.md"
done
cat "$out/tables.md"
