#!/usr/bin/env bash
# Long run of the input readers' property tests (tests/reader_properties.rs): each
# property runs again and again, PROPTEST_CASES inputs at a time with a fresh random
# seed, until its share of SECONDS has passed; the properties run one after the other
# on one test thread (the readers use rayon inside). Prints each property's count of
# inputs tried and the total. A failure stops the run and prints the smallest input.
#
#   experiments/reader_fuzz.sh [SECONDS]      (default 600, i.e. about 10 minutes)
set -euo pipefail
cd "$(dirname "$0")/.."
total="${1:-600}"
export CARGO_TARGET_DIR="${CARGO_TARGET_DIR:-${XDG_CACHE_HOME:-$HOME/.cache}/slowfield-target}"
export PROPTEST_CASES="${PROPTEST_CASES:-2000}"
cargo test --release --test reader_properties --no-run
properties=$(grep -cE '^    check\(' tests/reader_properties.rs)
READER_FUZZ_SECONDS=$(awk -v t="$total" -v n="$properties" 'BEGIN { print t / n }')
export READER_FUZZ_SECONDS
echo "reader_fuzz: $properties properties, $READER_FUZZ_SECONDS s each, $PROPTEST_CASES cases a run ($(date -u +%FT%TZ))"
log=$(mktemp)
start=$(date +%s)
status=0
cargo test --release --test reader_properties -- --test-threads=1 --nocapture 2>&1 | tee "$log" || status=$?
end=$(date +%s)
echo
echo "reader_fuzz: inputs tried per property:"
# (with one test thread a count follows its test's name on the same line)
counts=$(grep -o 'reader property .*' "$log" || true)
echo "$counts"
tried=$(printf '%s\n' "$counts" | sed -nE 's/.*: ([0-9]+) inputs tried.*/\1/p' | awk '{ s += $1 } END { print s + 0 }')
echo "reader_fuzz: ${tried:-0} inputs in $((end - start)) s, exit status $status"
rm -f "$log"
exit "$status"
