#!/usr/bin/env bash
# Benchmarks split, verify and check on demo-scenario data, next to the I/O
# floor: cleave's own reader and writer copying the same file once with no
# split work (and pyarrow doing the same, when it is installed). verify is
# also set beside the read floor: reading every partition once, every
# column decoded, nothing else done.
#
#   benches/split.sh                 # 1M and 10M rows
#   benches/split.sh 1000000         # sizes of your choice
#
# Data goes to bench-data/ (not committed). Reports wall seconds, rows per
# second, peak resident memory (GNU time) and the ratio to the floor.
set -euo pipefail
cd "$(dirname "$0")/.."
if [ $# -gt 0 ]; then sizes=("$@"); else sizes=(1000000 10000000); fi
cargo build --release --quiet --bin cleave --example demo_data --example copy_floor --example read_floor --example hash_floor
bin=target/release/cleave
mkdir -p bench-data
timed() { # label rows floor_seconds command...
  local label=$1 rows=$2 floor=$3; shift 3
  /usr/bin/time -f '%e %M' -o bench-data/time.txt "$@" > /dev/null 2> bench-data/stderr.txt || {
    # check exits 1 when it finds leaks, which the benchmark plants on purpose
    [ "$label" != "${label#check}" ] || { cat bench-data/stderr.txt; exit 1; }
  }
  read -r secs kib < <(tail -n 1 bench-data/time.txt)
  awk -v l="$label" -v s="$secs" -v k="$kib" -v n="$rows" -v f="$floor" 'BEGIN {
    ratio = (f > 0 ? sprintf("%.2fx", s / f) : "-")
    printf "%-34s %8.2f s %12.0f rows/s %9.0f MiB   %s of floor\n", l, s, (s > 0 ? n / s : 0), k / 1024, ratio }'
  LAST=$secs
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
    rm -rf "$out"
    timed "split (stratified, label, group)" "$n" "$floor" \
      "$bin" split "$input" --out "$out" --stratify bloom_class --label bloom_class --group station
    timed "read floor: every partition once" "$n" 0 target/release/examples/read_floor "$out"
    read_floor=$LAST
    timed "verify (ratio to the read floor)" "$n" "$read_floor" "$bin" verify "$out"
    timed "verify --deep (every partition)" "$n" "$read_floor" "$bin" verify "$out" --deep
    timed "check of the input vs the seal" "$n" "$floor" "$bin" check "$input" --against "$out"
  done
done
