"""Medians of the timed runs of a benchmark log (benches/common/timed_runs.sh):
lines of labels, wall seconds and peak MB, tab-separated. The labels before
the last one group the runs (a format, a size); the last names the variant.
Each variant's median wall time and largest peak, and its ratio to the
variant BASE of the same group. Each `--at-most VARIANT=RATIO` is a target:
the script exits 1, naming it, when that variant's median is above RATIO
times BASE's in any group.

usage: python3 benches/common/medians.py LOG BASE [--at-most VARIANT=RATIO ...]
"""
import collections
import statistics
import sys


def main() -> None:
    log, base = sys.argv[1], sys.argv[2]
    targets = {}
    rest = sys.argv[3:]
    while rest:
        flag, target, *rest = rest
        if flag != "--at-most" or "=" not in target:
            sys.exit(f"usage: medians.py LOG BASE [--at-most VARIANT=RATIO ...], not {flag} {target}")
        variant, ratio = target.split("=", 1)
        targets[variant] = float(ratio)
    missed = []
    times, memory = collections.defaultdict(list), collections.defaultdict(list)
    for line in open(log):
        *labels, wall, peak = line.rstrip("\n").split("\t")
        key = tuple(labels)
        times[key].append(float(wall))
        memory[key].append(int(peak))
    for key in times:
        group, variant = key[:-1], key[-1]
        median = statistics.median(times[key])
        reference = statistics.median(times[(*group, base)])
        where = " ".join(group)
        print(f"{where:>10} {variant:>13}: median {median:6.2f} s, peak {max(memory[key])} MB, "
              f"{median / reference:.2f} x {base}")
        if variant in targets and median > targets[variant] * reference:
            missed.append(f"{where} {variant}: {median / reference:.2f} x {base}, target at most {targets[variant]}")
    if missed:
        sys.exit("target missed: " + "; ".join(missed))


if __name__ == "__main__":
    main()
