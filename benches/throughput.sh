#!/usr/bin/env bash
# Pulsar batch throughput: lapse (1 and 2 threads, end to end from Parquet in
# to Parquet out) against the astropy chain (benches/astropy_chain.py) on the
# same rows, measured in one run. Usage: benches/throughput.sh [ROWS]
set -euo pipefail
cd "$(dirname "${BASH_SOURCE[0]}")/.."
export CARGO_TARGET_DIR="${CARGO_TARGET_DIR:-$HOME/.cache/lapse/target}"
n="${1:-100000}"
venv="${LAPSE_CACHE:-$HOME/.cache/lapse}/venv"
"$venv/bin/pip" install --quiet -r tests/reference/requirements.txt pyarrow
cargo build --release --quiet --example make_pulsar_rows
cargo build --release --quiet
dir="$(mktemp -d)"
trap 'rm -rf "$dir"' EXIT
"$CARGO_TARGET_DIR/release/examples/make_pulsar_rows" "$n" "$dir/rows.parquet" >/dev/null
sed -e "s|\.\./data|$PWD/data|g; s|$PWD/data/demo/pulsar_toas.parquet|$dir/rows.parquet|; s|\.\./out/pulsar_demo.parquet|$dir/out.parquet|" \
    pipelines/pulsar_demo.toml > "$dir/p.toml"
# The machine is shared and noisy: each thread count runs REPS times,
# interleaved; rows/s and the ratios use the fastest run (the least
# disturbed), the median is shown beside it.
reps="${REPS:-5}"
for i in $(seq "$reps"); do
  for t in 1 2; do
    s0=$(date +%s%N)
    /usr/bin/time -f "%M" -o "$dir/rss" "$CARGO_TARGET_DIR/release/lapse" run "$dir/p.toml" -q --no-plots --threads "$t"
    s1=$(date +%s%N)
    echo "$(python3 -c "print(f'{($s1 - $s0) / 1e9:.3f}')") $(cat "$dir/rss")" >> "$dir/t$t"
  done
done
echo "| run | rows | wall s (min of $reps) | median s | rows/s | peak RSS MiB |"
echo "|---|---:|---:|---:|---:|---:|"
for t in 1 2; do
  read -r wall med rss < <(sort -n "$dir/t$t" | awk '{w[NR]=$1; if ($2>m) m=$2} END {print w[1], w[int((NR+1)/2)], m}')
  rate=$(python3 -c "print(round($n/$wall))")
  eval "rate$t=$rate"
  echo "| lapse, $t thread(s) | $n | $wall | $med | $rate | $((rss / 1024)) |"
done
read -r per_row m _ < <("$venv/bin/python" benches/astropy_chain.py "$dir/rows.parquet" "$n")
arate=$(python3 -c "print(round(1/$per_row))")
echo "| astropy chain (vectorised per site), one run | $m | $(python3 -c "print(round($per_row*$m,2))") | - | $arate | - |"
echo
echo "ratio lapse (2 threads) / astropy: $(python3 -c "print(round($rate2/$arate,1))")x; 2-thread / 1-thread scaling: $(python3 -c "print(round($rate2/$rate1,2))")x"
