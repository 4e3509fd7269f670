#!/usr/bin/env bash
# Benchmarks split, verify and check on demo-scenario data, next to the I/O
# floor: cleave's own reader and writer copying the same file once with no
# split work (and pyarrow doing the same, when it is installed). verify is
# also set beside the read floor: reading every partition once, every
# column decoded, nothing else done.
#
#   benches/split.sh                 # 1M and 10M rows
#   benches/split.sh 1000000         # sizes of your choice
#   REPEAT=5 benches/split.sh        # runs per figure (default 3)
#
# Data goes to bench-data/ (not committed). Reports wall seconds (the median
# of REPEAT runs, with the fastest and slowest beside it: a shared machine's
# speed drifts from minute to minute), rows per second, peak resident memory
# (GNU time, the largest of the runs) and the ratio of the medians to the
# floor's median.
set -euo pipefail
cd "$(dirname "$0")/.."
if [ $# -gt 0 ]; then sizes=("$@"); else sizes=(1000000 10000000); fi
repeat=${REPEAT:-3}
cargo build --release --quiet --bin cleave --example demo_data --example copy_floor --example read_floor --example hash_floor
bin=target/release/cleave
mkdir -p bench-data
PREP=:
timed() { # label rows floor_seconds command... (PREP runs before each run)
  local label=$1 rows=$2 floor=$3; shift 3
  : > bench-data/times.txt
  for _ in $(seq "$repeat"); do
    eval "$PREP"
    /usr/bin/time -f '%e %M' -o bench-data/time.txt "$@" > /dev/null 2> bench-data/stderr.txt || {
      # check exits 1 when it finds leaks, which the benchmark plants on purpose
      [ "$label" != "${label#check}" ] || { cat bench-data/stderr.txt; exit 1; }
    }
    tail -n 1 bench-data/time.txt >> bench-data/times.txt
  done
  read -r secs lo hi kib < <(sort -n bench-data/times.txt | awk '
    { s[NR] = $1; if ($2 > k) k = $2 }
    END { m = (NR % 2 ? s[(NR + 1) / 2] : (s[NR / 2] + s[NR / 2 + 1]) / 2); print m, s[1], s[NR], k }')
  awk -v l="$label" -v s="$secs" -v lo="$lo" -v hi="$hi" -v k="$kib" -v n="$rows" -v f="$floor" 'BEGIN {
    ratio = (f > 0 ? sprintf("%.2fx", s / f) : "-")
    printf "%-34s %7.2f s (%.2f-%.2f) %11.0f rows/s %7.0f MiB   %s of floor\n", l, s, lo, hi, (s > 0 ? n / s : 0), k / 1024, ratio }'
  LAST=$secs
  PREP=:
}
# BLAKE3 alone, one row's worth of bytes at a time (the demo rows encode to
# about 150 bytes): no row digest can cost less, whatever the I/O.
target/release/examples/hash_floor 2000000 150
for n in "${sizes[@]}"; do
  for ext in parquet csv; do
    input="bench-data/wq-$n.$ext"
    [ -f "$input" ] || target/release/examples/demo_data --rows "$n" "$input" 2>/dev/null
    echo "== $n rows, $ext ($(du -hL "$input" | cut -f1))"
    timed "floor: read + write once" "$n" 0 target/release/examples/copy_floor "$input" "bench-data/copy.$ext"
    floor=$LAST
    if [ "$ext" = parquet ] && python3 -c 'import pyarrow' 2>/dev/null; then
      timed "pyarrow: read + write once" "$n" "$floor" python3 -c \
        "import pyarrow.parquet as pq, sys; pq.write_table(pq.read_table(sys.argv[1]), sys.argv[2])" \
        "$input" bench-data/pyarrow-copy.parquet
    fi
    out="bench-data/out-$n-$ext"
    PREP="rm -rf '$out'"
    timed "split (stratified, label, group)" "$n" "$floor" \
      "$bin" split "$input" --out "$out" --stratify bloom_class --label bloom_class --group station
    timed "read floor: every partition once" "$n" 0 target/release/examples/read_floor "$out"
    read_floor=$LAST
    timed "verify (ratio to the read floor)" "$n" "$read_floor" "$bin" verify "$out"
    timed "verify --deep (every partition)" "$n" "$read_floor" "$bin" verify "$out" --deep
    timed "check of the input vs the seal" "$n" "$floor" "$bin" check "$input" --against "$out"
  done
done
