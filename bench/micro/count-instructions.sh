#!/bin/sh
# Instructions per record of a micro-benchmark, counted by valgrind (same count run after run,
# whatever else the machine does; timing here drifts by 10-25 %). Runs the script with
# --rounds 1 and --rounds 4 and divides the difference by the records of 3 rounds, which
# leaves out start-up and most compilation (--no-concurrent-recompilation compiles in line).
#   sh bench/micro/count-instructions.sh bench/micro/stage1.mjs [more arguments]
# The script must print "records per round N". Add --cache to simulate caches (cachegrind).
set -e
script=$1; shift
tool=callgrind; extra=
if [ "$1" = "--cache" ]; then tool=cachegrind; extra=--cache-sim=yes; shift; fi
run() {
  valgrind --tool=$tool $extra --$tool-out-file=/dev/null node --no-concurrent-recompilation "$script" "$@" 2>&1
}
one=$(run "$@" --rounds 1)
four=$(run "$@" --rounds 4)
n=$(printf '%s\n' "$one" | sed -n 's/.*records per round \([0-9]*\).*/\1/p')
ir() { printf '%s\n' "$1" | sed -n 's/.*\(Collected\|I *refs\): *\([0-9,]*\).*/\2/p' | tr -d , | head -1; }
a=$(ir "$one"); b=$(ir "$four")
echo "$script: $(( (b - a) / (3 * n) )) instructions per record ($n records a round)"
if [ "$tool" = cachegrind ]; then
  for what in 'D1  misses' 'LLd misses'; do
    x=$(printf '%s\n' "$one" | grep "$what" | awk '{print $4}' | tr -d ,)
    y=$(printf '%s\n' "$four" | grep "$what" | awk '{print $4}' | tr -d ,)
    echo "  $what per record: $(( (y - x) * 100 / (3 * n) ))/100"
  done
fi
