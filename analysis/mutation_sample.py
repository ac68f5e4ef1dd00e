"""Mutation score of the named modules from a uniform random sample of their mutants (mutmut 3.8).

The modules under test (``[tool.mutmut]`` in pyproject.toml: ``beadsim/studies/``, ``beadsim/analysis/``
and ``beadsim/engine/integrators.py``) give about 21,000 mutants; testing each against the unit tests
would take days on a 2-core machine. A uniform random sample of K of them, drawn with a fixed seed,
estimates the score (killed / tested) with the binomial standard error sqrt(p (1 - p) / K), and lists
every survivor of the sample, so that the ones that matter can be killed by new tests and the same
sample tested again. Mutants in functions no unit test calls count as survivors ("no tests").

Usage, from the repository root (``pip install -e ".[test,mutation]"``), after one ``mutmut run NAME``
has generated the mutants and collected which tests reach which function::

    python analysis/mutation_sample.py --sample 250 --seed 1 --json analysis/mutation_DATE.json
    python analysis/mutation_sample.py --rerun analysis/mutation_DATE.json --json analysis/mutation_DATE_after.json

The first draws the sample and tests it; ``--rerun`` tests again the mutants of a previous record whose
status is one of ``--again`` (default: all but "killed") and keeps the other verdicts (for new tests
only: a test removed or changed could let a killed mutant live, and a change to the named modules'
source may renumber their mutants). mutmut ends a mutant's tests after (estimated test time + 1 s) x 30
CPU-seconds; its estimate can be far too small for tests whose work sits in fixtures, so a "timeout"
counts as not tested (rerun it with a larger ``timeout_constant`` in ``[tool.mutmut]``).
``mutmut show NAME`` prints the change a mutant makes.
"""

import argparse
from collections import Counter
import json
import math
import platform
import random
import subprocess
import sys
import time
from pathlib import Path

from mutmut.stats import status_by_exit_code

KILLED = ("killed", "segfault")
"""Statuses that count as killed: the tests failed or crashed. A "timeout" counts as not tested: mutmut's
time limit comes from an estimate of the tests' time that misses work done in fixtures, so a timeout
says nothing until it is rerun with a larger ``timeout_constant``."""

NOT_TESTED = (None, "not checked", "skipped", "timeout", "suspicious")
"""Statuses left out of the score."""


def meta_files():
    return sorted(Path("mutants").rglob("*.py.meta"))


def all_mutants():
    """Every mutant name mutmut generated, from the ``.meta`` files beside the mutated sources."""
    return [name for meta in meta_files() for name in sorted(json.loads(meta.read_text())["exit_code_by_key"])]


def statuses(names):
    """mutmut's status of each named mutant ("killed", "survived", "no tests", ...)."""
    wanted = set(names)
    return {name: status_by_exit_code[code] for meta in meta_files()
            for name, code in json.loads(meta.read_text())["exit_code_by_key"].items() if name in wanted}


def main():
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--sample", type=int, default=250, help="mutants to draw")
    p.add_argument("--seed", type=int, default=1, help="seed of the draw")
    p.add_argument("--rerun", help="a previous record: test some of its mutants again")
    p.add_argument("--again", nargs="+", default=["survived", "no tests", "timeout", "suspicious"],
                   help="with --rerun: the statuses to test again")
    p.add_argument("--children", type=int, default=2, help="mutants tested at once")
    p.add_argument("--no-run", action="store_true",
                   help="test nothing: write the record from the verdicts mutmut has stored (after a stopped run)")
    p.add_argument("--json", required=True, help="record to write")
    args = p.parse_args()
    started = time.time()
    if args.rerun:
        previous = json.loads(Path(args.rerun).read_text())
        sample, population, seed = previous["mutants"], previous["population"], previous["seed"]
        status = dict(previous["status"])
        to_test = [n for n in sample if status.get(n) in args.again]
    else:
        names = all_mutants()
        population, seed = len(names), args.seed
        sample = sorted(random.Random(seed).sample(names, min(args.sample, population)))
        to_test, status = sample, {}
    if to_test and not args.no_run:
        subprocess.run([sys.executable, "-m", "mutmut", "run", "--max-children", str(args.children), *to_test],
                       check=False)
    status.update(statuses(to_test))
    tested = [n for n in sample if status.get(n) not in NOT_TESTED]
    killed = [n for n in tested if status[n] in KILLED]
    score = len(killed) / len(tested) if tested else float("nan")
    record = {
        "what": "mutation score (killed / tested) of a uniform random sample of the mutants of the modules in "
                "[tool.mutmut], against the unit tests; crashes count as killed, 'no tests' as survived, "
                "timeouts and mutants not reached as not tested",
        "date": time.strftime("%Y-%m-%d %H:%M UTC", time.gmtime(started)),
        "machine": f"{platform.processor() or platform.machine()}, {platform.node()}",
        "commit": subprocess.run(["git", "rev-parse", "--short", "HEAD"], capture_output=True,
                                 text=True).stdout.strip(),
        "seed": seed, "population": population, "mutants": sample, "tested": len(tested),
        "killed": len(killed), "score": score, "counts": dict(Counter(status[n] for n in sample if n in status)),
        "score_error": math.sqrt(score * (1 - score) / len(tested)) if tested else None,
        "status": status, "survivors": sorted(n for n in tested if n not in killed),
        "wall_seconds": round(time.time() - started),
    }
    Path(args.json).write_text(json.dumps(record, indent=1) + "\n")
    print(f"{len(killed)} of {len(tested)} sampled mutants killed: score {score:.3f} +- {record['score_error']:.3f} "
          f"(population {population}); {len(record['survivors'])} survivors listed in {args.json}")


if __name__ == "__main__":
    main()
