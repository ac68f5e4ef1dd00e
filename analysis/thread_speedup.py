"""Two-thread speed-up of a benchmark system from many alternating, paired timed runs.

Usage: python analysis/thread_speedup.py SYSTEM PAIRS OUT.json   (SYSTEM: A-E of beadsim.bench)

Each pair times the same number of steps on two threads and on one, right after each other on the
same evolving state; the order inside a pair alternates, so a slow drift of the machine affects both
halves alike. Prints the median rates and the median and interquartile range of the pair ratios.
"""

import json
import os
import sys

import numpy as np

from beadsim import bench
from beadsim.engine.threads import set_threads


def main(system_name, pairs, out):
    set_threads(2)
    system, ff = bench.SYSTEMS[system_name][1]()
    sim = bench._prepare(system, ff, 300)
    steps = max(20, 2_000_000 // system.n_beads)
    two, one = [], []
    for k in range(pairs):
        if k % 2:
            one.append(bench._timed_rate(sim, steps, threads=1))
            two.append(bench._timed_rate(sim, steps))
        else:
            two.append(bench._timed_rate(sim, steps))
            one.append(bench._timed_rate(sim, steps, threads=1))
    two, one = np.array(two), np.array(one)
    q = np.percentile(two / one, [25, 50, 75])
    print(f"{system_name} pairs {pairs}: 2 threads median {np.median(two) / 1e6:.2f} M/s, 1 thread "
          f"{np.median(one) / 1e6:.2f}; ratio median {q[1]:.3f} IQR {q[0]:.2f}-{q[2]:.2f}; load {os.getloadavg()}")
    with open(out, "w") as fh:
        json.dump({"system": system_name, "steps_per_run": steps, "two_threads": two.tolist(),
                   "one_thread": one.tolist(), "machine": bench.machine_description()}, fh, indent=1)


if __name__ == "__main__":
    main(sys.argv[1], int(sys.argv[2]), sys.argv[3])
