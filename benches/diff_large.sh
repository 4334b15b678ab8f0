#!/usr/bin/env bash
# Benchmark of `lapse diff` on large tables: wall time and peak memory.
# Usage: benches/diff_large.sh [ROWS]   (default 10000000)
set -euo pipefail
cd "$(dirname "${BASH_SOURCE[0]}")/.."
export CARGO_TARGET_DIR="${CARGO_TARGET_DIR:-$HOME/.cache/lapse/target}"
n="${1:-10000000}"
dir="$(mktemp -d)"
trap 'rm -rf "$dir"' EXIT
cargo build --release --quiet --example make_large_tables
cargo build --release --quiet
"$CARGO_TARGET_DIR/release/examples/make_large_tables" "$n" "$dir/a.parquet" "$dir/b.parquet"
ls -l "$dir"/*.parquet
/usr/bin/time -v "$CARGO_TARGET_DIR/release/lapse" diff "$dir/a.parquet" "$dir/b.parquet" \
  --tolerance residual_s=1e-9 > "$dir/out.txt" 2> "$dir/time.txt" || true
head -30 "$dir/out.txt"
grep -E "Elapsed \(wall clock\)|Maximum resident set size" "$dir/time.txt"
