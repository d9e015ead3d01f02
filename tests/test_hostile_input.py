"""Hostile input: each case once ended in a traceback, a hang, a memory blow-up or a
silently changed design; now it gets exit code 2 with a message naming the key, and
nothing is written.

Every case here was found by the fuzz sweep (tests/benchmarks/fuzz_sweep.py) or named in
the issue, and failed before its fix (checked by running this file against the previous
commit under ``ulimit -v`` and a timeout).
"""

from __future__ import annotations

import subprocess
import sys
import textwrap
import tomllib
from pathlib import Path
from typing import Any

import pytest
from click.testing import CliRunner

from octrial.cli import main
from octrial.design.load import load_design
from octrial.design.write import dumps
from tests.helpers import DESIGNS, ONE_ARM, TWO_ARM, build, changed

COUNT_ONE_ARM: dict[str, Any] = changed(
    ONE_ARM, endpoint={"type": "count", "better": "lower", "exposure": 1.0},
    hypothesis={"benchmark": 1.5},
    arms={"treatment": {"prior": {"distribution": "gamma", "shape": 1.5, "rate": 1.0}}},
    scenarios={"treatment": [1.0, 1.5]})
COUNT_TWO_ARM: dict[str, Any] = changed(
    TWO_ARM, endpoint={"type": "count", "better": "lower", "exposure": 1.0},
    hypothesis={"comparison": "ratio", "margin": 0.0, "kind": "superiority"},
    arms={"treatment": {"prior": {"distribution": "gamma", "shape": 1, "rate": 1}},
          "control": {"prior": {"distribution": "gamma", "shape": 1, "rate": 1}}},
    scenarios={"control": [1.0]})

SCORE: dict[str, Any] = tomllib.loads(
    (DESIGNS / "two-arm-continuous-score.toml").read_text(encoding="utf-8"))

# (label, base design, changes, key named, words of the expectation)
DESIGN_CASES: list[tuple[str, dict[str, Any], dict[str, Any], str, str]] = [
    # OverflowError: n x weight overflowed to inf before the split into arms
    ("allocation 1e308", TWO_ARM, {"arms__treatment__allocation": 1e308},
     "arms.treatment.allocation", "magnitude from 1e-12 to 1e+12"),
    # accepted: the control arm's share of every look rounded to 0 subjects
    ("arm of zero subjects", TWO_ARM, {"arms__treatment__allocation": 1e12},
     "looks.n[1]", "at least one subject per arm"),
    # OverflowError converting inf to int
    ("look of 1e308 subjects", ONE_ARM, {"looks__n": [10, 20, 1e308]},
     "looks.n[3]", "magnitude"),
    # ValueError: array is too big (numpy)
    ("look of 2^62 subjects", ONE_ARM, {"looks__n": [10, 20, 2**62]},
     "looks.n[3]", "magnitude"),
    # a lattice of 10^12 points: a memory error (or hours of work)
    ("lattice beyond memory", ONE_ARM, {"looks__n": [10, 20, 10**12]},
     "looks.n", "memory limit of 2 GiB"),
    # OverflowError: (to - from) / step overflowed before the count check
    ("range from -1e308", ONE_ARM,
     {"scenarios__treatment": {"from": -1e308, "to": 0.5, "step": 0.1}},
     "scenarios.treatment.from", "magnitude"),
    # the control x effect grid was built in full before anything was counted
    ("grid of 10^10 scenarios", TWO_ARM,
     {"scenarios": {"control": {"from": 0.01, "to": 0.99, "step": 0.98 / 99_999},
                    "effect": {"from": 0.0, "to": 0.5, "step": 0.5 / 99_999}}},
     "scenarios.effect", "at most 100000 scenarios"),
    # ZeroDivisionError in the prior's effective sample size
    ("beta prior a = 1e308", ONE_ARM, {"arms__treatment__prior__a": 1e308},
     "arms.treatment.prior.a", "magnitude"),
    ("beta prior b = 1e-300", ONE_ARM, {"arms__treatment__prior__b": 1e-300},
     "arms.treatment.prior.b", "magnitude"),
    ("beta prior a = 1e12", ONE_ARM, {"arms__treatment__prior__a": 1e12},
     "arms.treatment.prior.a", "at most 1e+06"),
    # the predictive lattice from a prior mean of 10^6 events per subject: memory error
    ("gamma prior far above the scenarios", COUNT_ONE_ARM,
     {"arms__treatment__prior__shape": 1e6, "looks__futility_predictive": 0.05},
     "looks.n", "a prior mean far above the scenarios"),
    ("gamma prior shape 1e12", COUNT_ONE_ARM, {"arms__treatment__prior__shape": 1e12},
     "arms.treatment.prior.shape", "at most 1e+06"),
    # 2^62 studies per scenario: a memory error or a run of years
    ("replicates 2^62", ONE_ARM, {"simulation": {"replicates": 2**62}},
     "simulation.replicates", "from 1 to 10000000"),
    ("replicates x scenarios", ONE_ARM,
     {"simulation": {"replicates": 10_000_000, "method": "monte-carlo"},
      "scenarios__treatment": {"from": 0.01, "to": 0.99, "step": 0.0049}},
     "simulation.replicates", "at most 1e+09 simulated studies"),
    # the name becomes a folder name: 5000 characters failed with an OSError on writing
    ("name of 5000 characters", ONE_ARM, {"name": "x" * 5000},
     "name", "at most 100 letters"),
    # a negative ratio was silently dropped (rows left out), not reported
    ("negative ratio", COUNT_TWO_ARM, {"scenarios__ratio": [-1.0, 0.8]},
     "scenarios.ratio[1]", "a ratio > 0"),
    # an exposure per subject of 1e12: the lattice size became nan (ValueError)
    ("exposure 1e13", COUNT_ONE_ARM, {"endpoint__exposure": 1e13},
     "endpoint.exposure", "magnitude"),
    ("exposure 1e12", COUNT_ONE_ARM, {"endpoint__exposure": 1e12},
     "looks.n", "memory limit"),
    # the exact normal engine's grid spans the scenarios in standard errors: 3.7 PiB
    ("normal sd 1e-12", SCORE, {"endpoint__sd": 1e-12},
     "scenarios", "fits the exact normal engine's grid"),
]


def write(folder: Path, data: dict[str, Any], name: str = "design.toml") -> Path:
    path = folder / name
    path.write_text(dumps(data), encoding="utf-8")
    return path


def run_cli(args: list[str]) -> Any:
    result = CliRunner().invoke(main, args, catch_exceptions=True)
    # an exception other than SystemExit is a traceback on the command line
    assert result.exception is None or isinstance(result.exception, SystemExit), (
        repr(result.exception))
    return result


@pytest.mark.parametrize("label, base, changes, key, words", DESIGN_CASES,
                         ids=[c[0] for c in DESIGN_CASES])
def test_hostile_design_is_refused(tmp_path, label, base, changes, key, words) -> None:
    path = write(tmp_path, changed(base, **changes))
    out = tmp_path / "out"
    result = run_cli(["run", str(path), "--out", str(out), "--quiet"])
    assert result.exit_code == 2, result.output
    assert f"{path}: {key}: expected" in result.stderr
    assert words in result.stderr
    assert "Traceback" not in result.stderr
    assert not out.exists() or not any(out.iterdir())


def test_byte_order_mark_is_read(tmp_path) -> None:
    """A UTF-8 file starting with a byte-order mark (as some editors write) was refused as
    invalid TOML."""
    text = (DESIGNS / "single-arm-response.toml").read_text(encoding="utf-8")
    path = tmp_path / "single-arm-response.toml"
    path.write_bytes(b"\xef\xbb\xbf" + text.encode("utf-8"))
    assert load_design(path) == load_design(DESIGNS / "single-arm-response.toml")


def test_prior_far_from_zero_runs(tmp_path) -> None:
    """A normal prior mean of 1e12 (sd 6): its posterior variance was lost to rounding and
    the FDA effective sample size divided by zero; now that summary is left empty."""
    path = write(tmp_path, changed(SCORE, hypothesis__prior__mean=1e12))
    result = run_cli(["run", str(path), "--out", str(tmp_path / "out"), "--quiet"])
    assert result.exit_code == 0, result.output


def test_merely_out_of_range_pairs_are_still_left_out() -> None:
    """Documented behaviour kept: a valid effect that takes some control values outside
    (0, 1) leaves those pairs out and counts them."""
    design = build(TWO_ARM, scenarios={"control": [0.5, 0.9], "effect": [0.0, 0.2]})
    assert design.scenarios.dropped == 1


# (label, design file, --data values, key named, words)
DATA_CASES = [
    # ZeroDivisionError: a total exposure of 1e-300
    ("count exposure 1e-300", "single-arm-event-rate", ["treatment=1/1e-300"],
     "treatment", "magnitude from 1e-12"),
    # ValueError: nan lattice size from 10^20 events
    ("count of 10^20 events", "single-arm-event-rate", ["treatment=99999999999999999999/1"],
     "treatment", "magnitude"),
    # a 99 GiB allocation for 10^4 events in 30 subject-years
    ("count lattice beyond memory", "single-arm-event-rate", ["treatment=10000/30"],
     "--data", "memory limit of 2 GiB"),
    # OverflowError in the Student t posterior
    ("normal mean 1e308", "single-arm-mean-change", ["treatment=1e308,1,20"],
     "treatment", "magnitude"),
    # ValueError from brentq: f(a) and f(b) must have different signs
    ("normal mean -1e308 (two arms)", "two-arm-continuous-score",
     ["treatment=-1e308,1,20", "control=0,1,20"], "treatment", "magnitude"),
    ("normal sd 1e308 (two arms)", "two-arm-continuous-score",
     ["treatment=0,1e308,20", "control=0,1,20"], "treatment", "magnitude"),
]


@pytest.mark.parametrize("label, design, data, key, words", DATA_CASES,
                         ids=[c[0] for c in DATA_CASES])
def test_hostile_data_is_refused(label, design, data, key, words) -> None:
    args = ["decide", str(DESIGNS / f"{design}.toml"), "--look", "1"]
    for entry in data:
        args += ["--data", entry]
    result = run_cli(args)
    assert result.exit_code == 2, result.output
    where = "--data: " if key == "--data" else f"--data: {key}: "
    assert where in result.stderr and words in result.stderr, result.stderr


def test_digamma_terminates_and_matches_references() -> None:
    """The upward recurrence ran forever for -1e300 and -inf (x + 1 == x) and took 10^15
    steps for -1e15. References: scipy.special.digamma away from the poles and mpmath
    (40 digits) near them, where scipy's reflection loses digits."""
    script = textwrap.dedent("""
        import math
        import mpmath
        from scipy import special
        from octrial.simulation.special import digamma
        mpmath.mp.dps = 40
        for x in (-1e300, -math.inf, -1.0, -2.0**60):
            assert math.isnan(digamma(x)), x
        assert digamma(0.0) == -math.inf and digamma(-0.0) == math.inf
        assert digamma(math.inf) == math.inf and math.isnan(digamma(math.nan))
        for x in (-0.5, -3.7, -10.2, -100.3, -1e10 - 0.25, -2.5e15 - 0.5, 1e-300, 0.3,
                  7.0, 12.5, 1e300):
            assert math.isclose(digamma(x), special.digamma(x), rel_tol=1e-12, abs_tol=1e-13), x
        for x in (-0.999999, -1e-10, -2.0000001):
            assert math.isclose(digamma(x), float(mpmath.digamma(x)), rel_tol=1e-12), x
    """)
    done = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True,
                          timeout=120, check=False)
    assert done.returncode == 0, done.stderr
