#!/bin/bash
# Proves a change kept the output: the same shuffles with two builds, every part's sha256 and
# every manifest (its `run` section aside) compared.
#   sh bench/micro/same-bytes.sh OTHER_CHECKOUT [INPUT]     (OTHER_CHECKOUT built: its dist/)
# INPUT defaults to bench/data/readings-200m.csv (npm run bench makes it); 12 modes are run:
# folds, statistics kept by the lanes and read back, groups (random and grouped order), hash,
# spread order, named splits, counts with the rest, quantile bins, gzip, and the calling thread.
set -e
here=$(cd "$(dirname "$0")/../.." && pwd)
other=$(cd "$1" && pwd)
input=${2:-$here/bench/data/readings-200m.csv}
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
head -200001 "$input" > "$work/small.csv"
runs() {
  cli=$1; out=$2; mkdir -p "$out"
  run() { name=$1; shift; node "$cli" shuffle "$@" --out "$out/$name" --seed same-bytes --quiet; }
  run folds "$input" --partitions 8 --stratify fault --folds 5
  run stats "$work/small.csv" --partitions 4 --stratify fault --stats --threads 2
  run statsback "$work/small.csv" --partitions 40 --stats --memory 8MiB --threads 2
  run group "$work/small.csv" --partitions 4 --group sensor_id --stratify fault
  run grouped "$work/small.csv" --partitions 4 --group sensor_id --order grouped
  run hash "$work/small.csv" --partitions 4 --assign hash --key sensor_id --folds 3
  run spread "$work/small.csv" --partitions 3 --stratify fault --order spread --folds 2
  run splits "$work/small.csv" --split train=0.8,valid=0.1,test=0.1 --stratify fault
  run counts "$work/small.csv" --split test=5000,train=* --stratify site
  run bins "$work/small.csv" --partitions 4 --stratify temp_c:bins=4
  run gzip "$work/small.csv" --partitions 2 --gzip --stratify fault
  run inline "$work/small.csv" --partitions 3 --stratify fault --threads 0
  for m in "$out"/*/manifest.json; do
    node -e 'const m = JSON.parse(require("fs").readFileSync(process.argv[1], "utf8")); delete m.run; process.stdout.write(JSON.stringify(m))' "$m" > "$m.norun"
    rm "$m"
  done
  (cd "$out" && find . -type f | sort | xargs sha256sum)
}
runs "$other/dist/cli/main.js" "$work/a" > "$work/a.sums"
runs "$here/dist/cli/main.js" "$work/b" > "$work/b.sums"
if diff "$work/a.sums" "$work/b.sums"; then echo "same bytes: $(wc -l < "$work/a.sums") files"; else echo "DIFFERENT (lines above)"; exit 1; fi
