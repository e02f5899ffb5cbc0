"""Medians of the timed runs of a benchmark log (benches/common/timed_runs.sh):
lines of labels, wall seconds and peak MB, tab-separated. The labels before
the last one group the runs (a format, a size); the last names the variant.
Each variant's median wall time and largest peak, and its ratio to the
variant BASE of the same group. Each `--at-most VARIANT=RATIO` is a target:
the script exits 1, naming it, when that variant's median is above RATIO
times BASE's in any group; each `--peak-at-most VARIANT=MB` likewise when
that variant's largest peak is above MB in any group.

usage: python3 benches/common/medians.py LOG BASE [--at-most VARIANT=RATIO ...] [--peak-at-most VARIANT=MB ...]
"""
import collections
import statistics
import sys


def main() -> None:
    log, base = sys.argv[1], sys.argv[2]
    targets, peaks = {}, {}
    rest = sys.argv[3:]
    while rest:
        if len(rest) < 2:
            sys.exit(f"usage: medians.py LOG BASE [--at-most VARIANT=RATIO ...] [--peak-at-most VARIANT=MB ...], not {rest[0]}")
        flag, target, *rest = rest
        if flag not in ("--at-most", "--peak-at-most") or "=" not in target:
            sys.exit(f"usage: medians.py LOG BASE [--at-most VARIANT=RATIO ...] [--peak-at-most VARIANT=MB ...], not {flag} {target}")
        variant, bound = target.split("=", 1)
        (targets if flag == "--at-most" else peaks)[variant] = float(bound)
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
        if variant in peaks and max(memory[key]) > peaks[variant]:
            missed.append(f"{where} {variant}: peak {max(memory[key])} MB, target at most {peaks[variant]:g} MB")
    if missed:
        sys.exit("target missed: " + "; ".join(missed))


if __name__ == "__main__":
    main()
