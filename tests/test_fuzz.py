"""Fuzzing in the test run: mutated demo inputs get exit 0 or 2, never a traceback, a
hang or a memory blow-up, and nothing is written on exit 2.

The mutations are those of ``tests/fuzz_cases.py`` (every key of every demo design
replaced by extreme, wrong-type and boundary values; ``decide --data`` values; claims and
per-subject CSV cells). Every design mutation is loaded in this process (loading is where
a design is refused, and it is fast); a seeded sample of the commands runs in-process, and
a smaller one as subprocesses under a memory limit. The full sweep is
``tests/benchmarks/fuzz_sweep.py``.
"""

from __future__ import annotations

import functools
import random
import tomllib
from pathlib import Path

import pytest
from click.testing import CliRunner

from octrial.cli import main
from octrial.design.load import parse_design
from octrial.design.model import Source
from octrial.errors import InputError
from tests import fuzz_cases

SEED = 20261205
IN_PROCESS = 24
"""Commands run in this process (decide and CSV mutations)."""


@functools.cache
def _loaded() -> tuple[list[fuzz_cases.Case], list[fuzz_cases.Case], list[str]]:
    """Every design mutation loaded: (those that load, those refused, other failures)."""
    loads, refused, raised = [], [], []
    for case in fuzz_cases.design_cases():
        text = case.files[0][1]
        try:
            parse_design(tomllib.loads(text), Source("design.toml", "", text))
            loads.append(case)
        except InputError as exc:
            # every message names the file and a key
            if not all(p.key for p in exc.problems):
                raised.append(f"{case.label}: a problem without a key: {exc}")
            refused.append(case)
        except Exception as exc:  # any other exception is a traceback on the command line
            raised.append(f"{case.label}: {type(exc).__name__}: {exc}")
    return loads, refused, raised


def test_every_design_mutation_loads_or_is_refused() -> None:
    """Loading never raises anything but InputError (about 7000 mutations)."""
    loads, refused, raised = _loaded()
    assert not raised, "\n".join(raised[:20])
    assert len(loads) + len(refused) > 5000 and loads


def _sample(cases: list[fuzz_cases.Case], k: int, rng: random.Random) -> list:
    return rng.sample(cases, min(k, len(cases)))


def _in_process(case: fuzz_cases.Case, folder: Path) -> tuple[int, str, list[str]]:
    folder.mkdir(parents=True)
    for name, text in case.files:
        (folder / name).write_text(text, encoding="utf-8")
    names = {name for name, _ in case.files} | {"out"}
    args = [str(folder / a) if a in names else a for a in case.args]
    result = CliRunner().invoke(main, args, catch_exceptions=True)
    assert result.exception is None or isinstance(result.exception, SystemExit), (
        f"{case.label}: {result.exception!r}")
    written = [str(p) for p in folder.rglob("*")
               if p.is_file() and p.relative_to(folder).parts[0] not in names - {"out"}]
    return result.exit_code, result.stderr, written


def test_sampled_commands_in_process(tmp_path) -> None:
    rng = random.Random(SEED)
    cases = (_sample(list(fuzz_cases.decide_cases()), IN_PROCESS // 2, rng)
             + _sample(list(fuzz_cases.csv_cases()), IN_PROCESS // 2, rng))
    for i, case in enumerate(cases):
        code, stderr, written = _in_process(case, tmp_path / str(i))
        assert code in case.codes, f"{case.label}: exit {code}: {stderr}"
        assert "Traceback" not in stderr, case.label
        if code == 2:
            assert not written, f"{case.label}: wrote {written}"


def _subprocess_sample() -> list[fuzz_cases.Case]:
    """Two design mutations that load (they run an engine), one that does not, one
    ``--data`` and one claims-file mutation, drawn with the fixed seed."""
    rng = random.Random(SEED)
    loads, refused, _ = _loaded()
    return (_sample(loads, 2, rng) + _sample(refused, 1, rng)
            + _sample(list(fuzz_cases.decide_cases()), 1, rng)
            + _sample(list(fuzz_cases.csv_cases()), 1, rng))


@pytest.mark.parametrize("case", _subprocess_sample(), ids=lambda c: c.label[:60])
def test_sampled_commands_under_a_memory_limit(tmp_path, case) -> None:
    result = fuzz_cases.run_case(case, tmp_path)
    assert not result.problem, f"{case.label}: {result.problem}: {result.stderr[-2000:]}"
