"""Benchmark: verify and calibrate by simulation through the execution layer.

Run:  python tests/benchmarks/bench_resume.py      (without an install: PYTHONPATH=.)

On the unknown-sd demo (designs/single-arm-mean-change.toml, 20,000 studies per true
value, seeded), in one process each:

* calibration of the final threshold (alpha 0.025, power at 6, 3 null points, as in
  docs/calibration.md): without checkpoints (the reference: what calibrate did before it
  used the execution layer), with checkpoints (the cost of saving every candidate's true
  values), with 2 worker processes, and resumed after an interruption half-way (against
  starting again from nothing);
* verify of claims at five scenarios with 100,000 studies each (the default for claims
  of 10,000): 1 job against 2;
* an exact design (single-arm-response) evaluated with and without an Execution with
  checkpoints, to show exact engines pay nothing.

Every variant must give the same numbers; the script checks that and prints times and
ratios. The machine may be shared: compare ratios, not seconds.
"""

from __future__ import annotations

import os

for _name in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMBA_NUM_THREADS"):
    os.environ.setdefault(_name, "1")

import tempfile  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

import pandas as pd  # noqa: E402

import octrial  # noqa: E402
from octrial.calibration import calibrate  # noqa: E402
from octrial.evaluation import compute  # noqa: E402
from octrial.execution import Execution  # noqa: E402
from octrial.review import read_claims, verify  # noqa: E402

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "designs" / "single-arm-mean-change.toml"
EXACT = ROOT / "designs" / "single-arm-response.toml"
REQUEST = {"alpha": 0.025, "power": None, "alternative": [6.0], "null_points": 3}


class Halt(KeyboardInterrupt):
    pass


def timed(function, *args, **kwargs):
    start = time.perf_counter()
    result = function(*args, **kwargs)
    return result, time.perf_counter() - start


def calibration(execution: Execution | None = None):
    request = {k: v for k, v in REQUEST.items() if v is not None}
    return calibrate(octrial.load_design(DEMO), execution=execution, **request)


def bench_calibration(folder: Path) -> None:
    calibration()  # compile and warm up
    reference, t_ref = timed(calibration)
    saved: list[int] = []
    checkpointed, t_ckpt = timed(calibration, Execution(checkpoints=folder / "a",
                                                        on_saved=saved.append))
    two, t_two = timed(calibration, Execution(jobs=2, checkpoints=folder / "b"))
    half = len(saved) // 2
    count: list[int] = []

    def halt(index: int) -> None:
        count.append(index)
        if len(count) == half:
            raise Halt

    try:
        calibration(Execution(checkpoints=folder / "c", on_saved=halt))
    except Halt:
        pass
    resumed, t_resumed = timed(calibration, Execution(checkpoints=folder / "c"))
    for other in (checkpointed, two, resumed):
        pd.testing.assert_frame_equal(other.candidates, reference.candidates)
    print(f"calibrate (unknown sd, {reference.summary['evaluations']} evaluations x "
          f"{len(reference.truths.values)} true values x 20,000 studies)")
    print(f"  no checkpoints (reference)      {t_ref:7.2f} s")
    print(f"  checkpoints, 1 job              {t_ckpt:7.2f} s   x{t_ckpt / t_ref:.2f}")
    print(f"  checkpoints, 2 jobs             {t_two:7.2f} s   x{t_two / t_ref:.2f}")
    print(f"  resumed after {half} of {len(saved)} true values  {t_resumed:7.2f} s   "
          f"x{t_resumed / t_ref:.2f} (from scratch: x1)")


def bench_verify(folder: Path) -> None:
    design = octrial.load_design(DEMO)
    truths = [2.0, 3.0, 4.0, 5.0, 6.0]
    rows = [{"true_treatment": t, "metric": "prob_success", "claimed": "0.5",
             "replicates": 10_000} for t in truths]
    claims_path = folder / "claims.csv"
    pd.DataFrame(rows).to_csv(claims_path, index=False)
    claims = read_claims(claims_path, design)
    verify(design, claims, replicates=20_000)  # warm up
    one, t_one = timed(verify, design, claims, execution=Execution(checkpoints=folder / "v1"))
    two, t_two = timed(verify, design, claims,
                       execution=Execution(jobs=2, checkpoints=folder / "v2"))
    pd.testing.assert_frame_equal(one.table, two.table)
    print(f"verify (unknown sd, {len(truths)} scenarios x {one.info['replicates']:,} studies)")
    print(f"  1 job                           {t_one:7.2f} s")
    print(f"  2 jobs                          {t_two:7.2f} s   x{t_two / t_one:.2f}")


def bench_exact(folder: Path) -> None:
    design = octrial.load_design(EXACT)
    compute(design)
    repeats = 50
    _, t_plain = timed(lambda: [compute(design) for _ in range(repeats)])
    execution = Execution(checkpoints=folder / "x", progress=True)
    _, t_exec = timed(lambda: [compute(design, execution=execution) for _ in range(repeats)])
    print(f"exact engine (single-arm-response), {repeats} evaluations")
    print(f"  no execution                    {t_plain / repeats * 1e3:7.2f} ms each")
    print(f"  execution with checkpoints      {t_exec / repeats * 1e3:7.2f} ms each   "
          f"x{t_exec / t_plain:.2f}; files written: "
          f"{len(list((folder / 'x').rglob('*'))) if (folder / 'x').exists() else 0}")


def main() -> None:
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        bench_calibration(folder)
        bench_verify(folder)
        bench_exact(folder)


if __name__ == "__main__":
    main()
