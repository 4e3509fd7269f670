#!/usr/bin/env bash
# Benchmarks split, verify and check on demo-scenario data, next to the I/O
# floor: cleave's own reader and writer copying the same file once with no
# split work (and pyarrow doing the same, when it is installed). Two more
# floors show where a split's time must go: the partition floor (the input
# read once, rows taken into train, validation and test by their group, each
# written on its own thread, the test rows again as the label-free hand-off:
# the files a split writes, with no digests, no first pass and no seal) and
# the digest floor (the input read once and every row digested, nothing
# written). verify is also set beside the read floor: reading every
# partition once, every column decoded, nothing else done.
#
#   benches/split.sh                 # 1M and 10M rows
#   benches/split.sh 1000000         # sizes of your choice
#   REPEAT=5 benches/split.sh        # rounds per size and format (default 3)
#
# Data goes to bench-data/ (not committed). Each round runs every command
# once, floors included, so that a figure and its floor are measured in the
# same minutes (a shared machine's speed drifts from minute to minute).
# Reports wall seconds (the median of the rounds, with the fastest and
# slowest beside it), rows per second, CPU seconds (user and system, the
# median of the rounds: it drifts less than wall time, and says how much of
# both cores a command keeps busy), peak resident memory (GNU time, the
# largest of the rounds) and the ratio of the median to the floor's median.
set -euo pipefail
cd "$(dirname "$0")/.."
if [ $# -gt 0 ]; then sizes=("$@"); else sizes=(1000000 10000000); fi
repeat=${REPEAT:-3}
cargo build --release --quiet --bin cleave --example demo_data --example copy_floor --example read_floor --example hash_floor \
  --example partition_floor --example digest_floor
bin=target/release/cleave
mkdir -p bench-data
measure() { # key command...: appends "seconds KiB cpu-seconds" to bench-data/times-KEY.txt
  local key=$1; shift
  /usr/bin/time -f '%e %M %U %S' -o bench-data/time.txt "$@" > /dev/null 2> bench-data/stderr.txt || {
    # check exits 1 when it finds leaks, which the benchmark plants on purpose
    [ "$key" = check ] || { cat bench-data/stderr.txt; exit 1; }
  }
  tail -n 1 bench-data/time.txt | awk '{ print $1, $2, $3 + $4 }' >> "bench-data/times-$key.txt"
}
middle() { # column file: the median of a column of numbers
  cut -d' ' -f"$1" "$2" | sort -n | awk '{ v[NR] = $1 } END { print (NR % 2 ? v[(NR + 1) / 2] : (v[NR / 2] + v[NR / 2 + 1]) / 2) }'
}
median() { # key: "median fastest slowest KiB median-cpu" of its rounds
  local f="bench-data/times-$1.txt"
  echo "$(middle 1 "$f") $(sort -n "$f" | head -n 1 | cut -d' ' -f1) $(sort -n "$f" | tail -n 1 | cut -d' ' -f1)" \
    "$(cut -d' ' -f2 "$f" | sort -n | tail -n 1) $(middle 3 "$f")"
}
report() { # label key rows floor_key (or -)
  local label=$1 key=$2 rows=$3 floor=0
  [ "$4" = - ] || floor=$(median "$4" | cut -d' ' -f1)
  read -r secs lo hi kib cpu < <(median "$key")
  awk -v l="$label" -v s="$secs" -v lo="$lo" -v hi="$hi" -v k="$kib" -v c="$cpu" -v n="$rows" -v f="$floor" 'BEGIN {
    ratio = (f > 0 ? sprintf("%.2fx", s / f) : "-")
    printf "%-34s %7.2f s (%.2f-%.2f) %11.0f rows/s %6.2f CPU-s %7.0f MiB   %s of floor\n", l, s, lo, hi, (s > 0 ? n / s : 0), c, k / 1024, ratio }'
}
# BLAKE3 alone, one row's worth of bytes at a time (the demo rows encode to
# about 150 bytes): no row digest can cost less, whatever the I/O.
target/release/examples/hash_floor 2000000 150
pyarrow=no
python3 -c 'import pyarrow' 2>/dev/null && pyarrow=yes
for n in "${sizes[@]}"; do
  for ext in parquet csv; do
    input="bench-data/wq-$n.$ext"
    [ -f "$input" ] || target/release/examples/demo_data --rows "$n" "$input" 2>/dev/null
    echo "== $n rows, $ext ($(du -hL "$input" | cut -f1)), $repeat rounds"
    rm -f bench-data/times-*.txt
    out="bench-data/out-$n-$ext"
    for _ in $(seq "$repeat"); do
      measure copy target/release/examples/copy_floor "$input" "bench-data/copy.$ext"
      if [ "$ext" = parquet ] && [ "$pyarrow" = yes ]; then
        measure pyarrow python3 -c \
          "import pyarrow.parquet as pq, sys; pq.write_table(pq.read_table(sys.argv[1]), sys.argv[2])" \
          "$input" bench-data/pyarrow-copy.parquet
      fi
      measure partition target/release/examples/partition_floor "$input" bench-data/partition-floor bloom_class station
      measure digest target/release/examples/digest_floor "$input" bloom_class
      rm -rf "$out"
      measure split "$bin" split "$input" --out "$out" --stratify bloom_class --label bloom_class --group station
      measure read target/release/examples/read_floor "$out"
      measure verify "$bin" verify "$out"
      measure deep "$bin" verify "$out" --deep
      measure check "$bin" check "$input" --against "$out"
    done
    report "floor: read + write once" copy "$n" -
    [ ! -f bench-data/times-pyarrow.txt ] || report "pyarrow: read + write once" pyarrow "$n" copy
    report "partition floor: the split's files" partition "$n" copy
    report "digest floor: read + row digests" digest "$n" copy
    report "split (stratified, label, group)" split "$n" copy
    report "split, ratio to partition floor" split "$n" partition
    report "read floor: every partition once" read "$n" -
    report "verify (ratio to the read floor)" verify "$n" read
    report "verify --deep (every partition)" deep "$n" read
    report "check of the input vs the seal" check "$n" copy
  done
done
