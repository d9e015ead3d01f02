"""Mutations of the demo inputs for the fuzz test and the full sweep.

Every key path of every demo design (tables, keys and list entries) is replaced in turn
by extreme, wrong-type and boundary values; ``octrial decide --data`` values and the
claims and per-subject CSV files get the same treatment. Each mutated input is run by
the command line in a subprocess with a memory limit and a timeout, and the outcome is
judged: exit 0 or 2 only, no traceback, no memory error, no hang, and nothing written
on exit 2.

``tests/test_fuzz.py`` runs a seeded sample in the default test run;
``tests/benchmarks/fuzz_sweep.py`` runs everything.
"""

from __future__ import annotations

import copy
import os
import resource
import subprocess
import sys
import tomllib
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from octrial.design.write import dumps
from octrial.review.arms_verification import several_arms

ROOT = Path(__file__).resolve().parents[1]
DESIGNS = [p for p in sorted((ROOT / "designs").glob("*.toml")) if not several_arms(p)]
"""The single-design demos (parse_design reads them; several-arm demos are not)."""

MEMORY_LIMIT = 3 * 2**30
"""Address space of one command (bytes): the limit on a design's estimated working memory
(2 GiB, octrial.design.limits.MEMORY_LIMIT) plus the interpreter, numpy, scipy and numba
(every demo design runs inside 2 GiB of address space)."""

TIMEOUT = 90.0
"""Seconds before a command counts as hung (the demos take under 10 s each when numba's
cache is warm; a first compile takes longer)."""

FAST_REPLICATES = 400
"""Replicates of the mutated designs (the demos' own numbers take longer to simulate and
find nothing more), except when ``simulation.replicates`` is the key mutated."""

LONG = "x" * 5000
VALUES: tuple[Any, ...] = (
    1e308, -1e308, 1e-300, -1e-300, 1e12, -1e12, 1e-12, 0, -1, 1, 0.5, 2**62, 2**63 - 1,
    -(2**62),
    float("inf"), float("nan"), "nan", "inf", "", LONG, "0.5", True, False,
    {}, {"x": 1}, [], [1e308], [0], list(range(2000)), list(range(1, 2001)), "none",
)
"""Replacement values: extreme magnitudes, the largest and smallest a design file allows
(docs/design-files.md, 'Limits'), zero and one, wrong types (string, bool, table, list)
and a huge list."""


@dataclass(frozen=True)
class Case:
    """One mutated input: the command line, and the files written before it runs."""

    label: str
    args: tuple[str, ...]
    files: tuple[tuple[str, str], ...]
    """(file name, text) pairs written to the case's folder; args refer to them."""
    codes: tuple[int, ...] = (0, 2)
    """Exit codes that are not findings (verify: 1 when a claim is discrepant)."""


@dataclass(frozen=True)
class Result:
    """What one case did."""

    case: Case
    returncode: int | None
    stderr: str
    written: tuple[str, ...]
    hung: bool

    @property
    def problem(self) -> str:
        """Why this result is a finding ('' when it is not)."""
        if self.hung:
            return "hung (timeout)"
        if "Traceback" in self.stderr:
            return "traceback"
        if "MemoryError" in self.stderr or self.returncode in (-9, -11):
            return "memory"
        if self.returncode not in self.case.codes:
            return f"exit {self.returncode}"
        if self.returncode == 2 and self.written:
            return "wrote " + ", ".join(self.written)
        return ""


def key_paths(value: Any, prefix: tuple[Any, ...] = ()) -> Iterator[tuple[Any, ...]]:
    """Every key path inside ``value`` (dict keys and list indices), parents first."""
    if isinstance(value, dict):
        for key, item in value.items():
            yield (*prefix, key)
            yield from key_paths(item, (*prefix, key))
    elif isinstance(value, list):
        for i, item in enumerate(value):
            yield (*prefix, i)
            yield from key_paths(item, (*prefix, i))


def replaced(data: dict[str, Any], path: tuple[Any, ...], value: Any) -> dict[str, Any]:
    """A deep copy of ``data`` with the entry at ``path`` set to ``value``."""
    out = copy.deepcopy(data)
    parent = out
    for step in path[:-1]:
        parent = parent[step]
    parent[path[-1]] = value
    return out


def base_design(path: Path) -> dict[str, Any]:
    """A demo design with few replicates (fast to simulate)."""
    data = tomllib.loads(path.read_text(encoding="utf-8"))
    data.setdefault("simulation", {})["replicates"] = FAST_REPLICATES
    return data


def _name(path: tuple[Any, ...]) -> str:
    return ".".join(str(p) for p in path)


def design_cases() -> Iterator[Case]:
    """``octrial run`` on every demo design with every key path replaced by every value."""
    for design in DESIGNS:
        data = base_design(design)
        for path in key_paths(data):
            for i, value in enumerate(VALUES):
                try:
                    text = dumps(replaced(data, path, value))
                except TypeError:
                    continue
                yield Case(f"{design.stem}:{_name(path)}={i}:{str(value)[:30]}",
                           ("run", "design.toml", "--out", "out", "--quiet"),
                           (("design.toml", text),))


DATA_VALUES: dict[str, tuple[str, ...]] = {
    "binary": ("1e308/5", "5/0", "0/0", "99999999999999999999999/99999999999999999999999",
               "-1/5", "5/3", "x/y", "", "/", "5", "3/1000000000000", "0/1", "1/1",
               "1/" + "9" * 400),
    "count": ("1/1e308", "1/1e-300", "0/1e-320", "99999999999999999999/1", "1/0", "1/-1",
              "1/nan", "1/inf", "1e400/1", "", "0/1", "4611686018427387904/1",
              "1000000000000/1", "9" * 400 + "/1"),
    "normal": ("1e308,1,20", "-1e308,1,20", "0,1e308,20", "0,1e-300,20", "0,0,20",
               "0,1,1", "0,1,4611686018427387904", "nan,1,20", "0,1," + "9" * 400, "0,1,20,",
               "", "1e400,1,20",
               "0,1,2", "1e-300,1e-300,2"),
    # no interim decisions for time-to-event designs yet: each must be refused plainly
    "time-to-event": ("10/500", "1e308/1", "", "x"),
}
"""``--data`` values per endpoint type (one arm's part after ``ARM=``)."""


def decide_cases() -> Iterator[Case]:
    """``octrial decide`` on every demo design, each arm's data replaced by each value."""
    for design in DESIGNS:
        data = tomllib.loads(design.read_text(encoding="utf-8"))
        kind = data["endpoint"]["type"]
        arms = list(data["arms"])
        good = {"binary": "5/20", "count": "20/20", "normal": "3,10,20",
                "time-to-event": "10/500"}[kind]
        text = design.read_text(encoding="utf-8")
        for arm in arms:
            for value in DATA_VALUES[kind]:
                args = ["decide", "design.toml", "--look", "1", "--json"]
                for other in arms:
                    args += ["--data", f"{other}={value if other == arm else good}"]
                yield Case(f"{design.stem}:decide:{arm}={value[:30]}", tuple(args),
                           (("design.toml", text),))


CELL_VALUES = ("1e308", "-1e308", "1e-300", "nan", "inf", "", "x" * 5000, "0", "-1",
               "99999999999999999999999", "4611686018427387904", "1.5", "\ufeff0.1")


def csv_cases() -> Iterator[Case]:
    """``octrial verify`` with each cell of the demo claims file replaced, and
    ``octrial decide --subjects`` with each cell of a per-subject file replaced."""
    claims_path = ROOT / "designs" / "single-arm-response.claims.csv"
    design_path = ROOT / "designs" / "single-arm-response.toml"
    design = base_design(design_path)
    design_text = dumps(design)
    lines = [line for line in claims_path.read_text(encoding="utf-8").splitlines()
             if line and not line.startswith("#")]
    header, rows = lines[0], lines[1:4]
    for r in range(len(rows)):
        cells = rows[r].split(",")
        for c in range(len(cells)):
            for value in CELL_VALUES:
                edited = [*cells]
                edited[c] = value
                body = [*rows]
                body[r] = ",".join(edited)
                text = "\n".join([header, *body]) + "\n"
                yield Case(f"claims:row{r + 1}:col{c + 1}={value[:30]}",
                           ("verify", "design.toml", "claims.csv", "--out", "out", "--quiet"),
                           (("design.toml", design_text), ("claims.csv", text)), (0, 1, 2))
    count = (ROOT / "designs" / "single-arm-event-rate.toml").read_text(encoding="utf-8")
    for column in (0, 1):
        for value in CELL_VALUES:
            rows_ = [["2", "1.0"] for _ in range(20)]
            rows_[3][column] = value
            text = "events,exposure\n" + "\n".join(",".join(r) for r in rows_) + "\n"
            yield Case(f"subjects:col{column + 1}={value[:30]}",
                       ("decide", "design.toml", "--look", "1", "--data", "treatment=40/20",
                        "--subjects", "subjects.csv"),
                       (("design.toml", count), ("subjects.csv", text)))


def _limit() -> None:
    resource.setrlimit(resource.RLIMIT_AS, (MEMORY_LIMIT, MEMORY_LIMIT))


def run_case(case: Case, folder: Path, timeout: float = TIMEOUT) -> Result:
    """Run ``case`` in ``folder`` (created) with the memory limit and ``timeout``."""
    folder.mkdir(parents=True, exist_ok=True)
    for name, text in case.files:
        (folder / name).write_text(text, encoding="utf-8")
    before = {p.name for p in folder.iterdir()}
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    try:
        done = subprocess.run([sys.executable, "-m", "octrial", *case.args], cwd=folder,
                              env=env, preexec_fn=_limit, capture_output=True, text=True,
                              timeout=timeout, check=False)
    except subprocess.TimeoutExpired as exc:
        stderr = exc.stderr.decode(errors="replace") if isinstance(exc.stderr, bytes) else ""
        return Result(case, None, stderr, (), True)
    written = tuple(sorted(str(p.relative_to(folder)) for p in folder.rglob("*")
                           if p.is_file() and p.relative_to(folder).parts[0] not in before)
                    ) if done.returncode == 2 else ()
    return Result(case, done.returncode, done.stderr, written, False)
