#!/bin/bash
# Times two builds of the fit benchmark in alternation on one core, so that both see the
# same state of a shared machine: criterion's median of one benchmark, round by round.
#
#   scripts/bench_ab.sh OLD_BENCH_BINARY NEW_BENCH_BINARY [BENCHMARK] [ROUNDS]
#
# Build each binary with `cargo bench --bench fit --no-run` (the old one from a worktree of
# the older commit with its own CARGO_TARGET_DIR); the path is printed as "Executable".
set -euo pipefail
old=$1
new=$2
bench=${3:-model_sio2_2048px_100-3000nm/cpu}
rounds=${4:-5}
median() {
    taskset -c 1 "$1" --bench "^$bench" --measurement-time 2 --warm-up-time 1 2>&1 |
        awk '/time:/ {print $4 " " $5; exit}'
}
echo "$(date '+%F %H:%M'), load $(cut -d' ' -f1-3 /proc/loadavg), $bench"
for i in $(seq 1 "$rounds"); do
    echo "round $i: old $(median "$old"), new $(median "$new")"
done
