#!/usr/bin/env bash
# Every speed figure of the README's performance section, measured in one run.
#
# Protocol: one benchmark at a time, in the order below, on whatever machine runs it
# (the README's figures: the 2-core development machine); each script states its own
# timing protocol in its docstring. The correctness fuzz runs (fuzz_solver.py) are not
# repeated here: they count agreements, not seconds.
#
# Run:  bash benchmarks/run_all.sh [output file]   (default results/benchmarks.txt)
set -u
cd "$(dirname "$0")/.."
out="${1:-results/benchmarks.txt}"
mkdir -p "$(dirname "$out")"
tmp="$out.partial"
: > "$tmp"
run() {
    echo "### $*" | tee -a "$tmp"
    local start=$SECONDS
    "$@" 2>&1 | tee -a "$tmp"
    echo "### ($((SECONDS - start)) s wall)" | tee -a "$tmp"
    echo | tee -a "$tmp"
}
{ date -u; nproc; python --version; } | tee -a "$tmp"
run python benchmarks/bench_evaluator.py
run python benchmarks/bench_startup.py
run python benchmarks/bench_solver.py --sizes 16 --repeat 3
for demo in edge_accelerator server_processor; do
    for table in 20 0; do
        run /usr/bin/time -f "%e s wall, %M KB peak" \
            dieplan solve "problems/$demo.toml" --no-write --table-time "$table"
    done
done
run python benchmarks/bench_subset_dp.py --processes 1 --max-dies 8 --sizes 16 18
run python benchmarks/bench_subset_dp.py --processes 3 --max-dies 8 --sizes 16 18
run python benchmarks/bench_subset_dp.py --processes 1 --max-dies 16 --sizes 16 18 --limit 300
run python benchmarks/bench_targets.py
run python benchmarks/bench_solver.py --skip-exhaustive --limit 120
run python benchmarks/bench_generation.py --sizes 16 18 20 22 24 --limit 240
run python benchmarks/bench_early.py
run python benchmarks/bench_sweep.py --every-point-scenarios 0 --density-scenarios 0
run python benchmarks/bench_family.py --repeat 3
run python benchmarks/bench_life.py --repeat 5
mv "$tmp" "$out"
