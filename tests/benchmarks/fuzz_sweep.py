"""Full fuzz sweep of the command line (not part of the test run; minutes to hours).

Every mutation of ``tests/fuzz_cases.py``: each demo design with every key path replaced
by every extreme, wrong-type and boundary value, ``decide --data`` values and claims and
per-subject CSV cells. Design mutations are first loaded in this process (fast): one
that raises anything but :class:`~octrial.errors.InputError` is a finding; those that load
are run by ``octrial run`` in a memory-limited subprocess, with a sample of the refused
ones (``--refused``) to confirm exit 2 and nothing written. Findings are printed and the
exit code is 1 when there are any.

Usage::

    PYTHONPATH=. python tests/benchmarks/fuzz_sweep.py [--only design|decide|csv]
        [--refused 0.05] [--jobs 1] [--match TEXT]
"""

from __future__ import annotations

import argparse
import random
import sys
import tempfile
import time
import tomllib
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import fuzz_cases

from octrial.design.load import parse_design
from octrial.design.model import Source
from octrial.errors import InputError


def loads(case: fuzz_cases.Case) -> str:
    """'ok', 'refused' or the exception's text when loading the design raises."""
    text = case.files[0][1]
    try:
        parse_design(tomllib.loads(text), Source("design.toml", "", text))
    except InputError:
        return "refused"
    except Exception as exc:  # any other exception is the finding
        return f"{type(exc).__name__}: {exc}"
    return "ok"


def main() -> int:
    """Run the sweep; print findings; 1 when there are any."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--only", choices=("design", "decide", "csv"))
    parser.add_argument("--refused", type=float, default=0.05,
                        help="share of refused design mutations also run by the CLI")
    parser.add_argument("--jobs", type=int, default=1)
    parser.add_argument("--match", default="", help="only cases whose label contains this")
    args = parser.parse_args()
    rng = random.Random(20261205)
    findings: list[str] = []
    to_run: list[fuzz_cases.Case] = []
    counts = {"ok": 0, "refused": 0}
    if args.only in (None, "design"):
        for case in fuzz_cases.design_cases():
            if args.match not in case.label:
                continue
            verdict = loads(case)
            if verdict in counts:
                counts[verdict] += 1
            else:
                findings.append(f"{case.label}: load raised {verdict}")
            if verdict == "ok" or rng.random() < args.refused:
                to_run.append(case)
        print(f"design mutations: {counts['ok']} load, {counts['refused']} refused, "
              f"{len(findings)} raised", flush=True)
    if args.only in (None, "decide"):
        to_run += [c for c in fuzz_cases.decide_cases() if args.match in c.label]
    if args.only in (None, "csv"):
        to_run += [c for c in fuzz_cases.csv_cases() if args.match in c.label]
    print(f"running {len(to_run)} commands", flush=True)
    start = time.perf_counter()
    with tempfile.TemporaryDirectory() as tmp, ThreadPoolExecutor(args.jobs) as pool:
        results = pool.map(lambda ic: fuzz_cases.run_case(ic[1], Path(tmp) / str(ic[0])),
                           enumerate(to_run))
        for i, result in enumerate(results, start=1):
            if result.problem:
                tail = result.stderr.strip().splitlines()[-1:] or [""]
                findings.append(f"{result.case.label}: {result.problem}: {tail[0][:300]}")
                print("FINDING", findings[-1], flush=True)
            if i % 25 == 0:
                print(f"{i}/{len(to_run)} in {time.perf_counter() - start:.0f} s", flush=True)
    print(f"{len(findings)} findings")
    for finding in findings:
        print(finding)
    return 1 if findings else 0


if __name__ == "__main__":
    raise SystemExit(main())
