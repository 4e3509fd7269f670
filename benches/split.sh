#!/usr/bin/env bash
# Times `cleave split` and `cleave verify` on demo-scenario data at 1M and
# 10M rows, as CSV and Parquet, and reports wall time and peak memory
# (GNU time). Data goes to bench-data/ (not committed); sizes can be given:
#   benches/split.sh 1000000 10000000
set -euo pipefail
cd "$(dirname "$0")/.."
sizes=("${@:-1000000 10000000}")
read -r -a sizes <<< "${sizes[*]}"
cargo build --release --quiet --bin cleave --example demo_data
bin=target/release/cleave
gen=target/release/examples/demo_data
mkdir -p bench-data
printf '%-22s %-7s %10s %12s %12s\n' input command seconds peak_MiB rows_per_s
for n in "${sizes[@]}"; do
  for ext in csv parquet; do
    input="bench-data/wq-$n.$ext"
    [ -f "$input" ] || "$gen" --rows "$n" "$input" 2>/dev/null
    out="bench-data/out-$n-$ext"
    rm -rf "$out"
    for cmd in split verify; do
      if [ "$cmd" = split ]; then
        args=(split "$input" --out "$out" --stratify bloom_class --label bloom_class)
      else
        args=(verify "$out")
      fi
      /usr/bin/time -f '%e %M' -o bench-data/time.txt "$bin" "${args[@]}" > /dev/null
      read -r secs kib < bench-data/time.txt
      awk -v i="$(basename "$input")" -v c="$cmd" -v s="$secs" -v k="$kib" -v n="$n" \
        'BEGIN { printf "%-22s %-7s %10.2f %12.1f %12.0f\n", i, c, s, k / 1024, (s > 0 ? n / s : 0) }'
    done
  done
done
