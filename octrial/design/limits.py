"""What a design costs to evaluate, estimated before anything is allocated, and the limits.

A design file can ask for more than any computer holds: a lattice of 2^62 counts, a
million looks, 10^7 replicates at each of 10^5 scenarios. Loading estimates the memory
and the work of the engines from the design's sizes alone and refuses a design beyond
the documented limits (docs/design-files.md, 'Limits') with a message that says what to
reduce, instead of failing with a memory error or running for days.

The estimates are rough on purpose (within a small factor of what the engines use,
measured with ``/usr/bin/time -f %M`` on two-arm binary designs of 250 000 and 1 000 000
lattice cells: about 300 bytes a cell with two looks); the limits sit far above every
design met in practice and far below what would exhaust a machine.
"""

from __future__ import annotations

import math

import numpy as np

from octrial.design.model import Design
from octrial.errors import Problem, SettingsError

MEMORY_LIMIT = 2 * 2**30
"""Largest estimated working memory of the exact lattice engine and the decision tables
(bytes)."""

LATTICE_WORK_LIMIT = 1e13
"""Largest estimated number of operations of the exact lattice engine (scenarios x looks
x lattice cells x largest per-arm lattice size); about an hour at the measured rate of a
few 10^9 a second."""

STUDIES_LIMIT = 1e9
"""Most simulated studies in a run (replicates x scenarios) when the design simulates."""

BYTES_PER_CELL_LOOK = 32
"""Estimated bytes per lattice cell and look (decision tables, distributions, masks)."""

BYTES_PER_CELL = 192
"""Estimated bytes per lattice cell independent of the looks (posterior tables)."""

BYTES_PER_NODE = 64
"""Estimated bytes per scenario and grid point of the exact normal engine (densities,
errors and their powers)."""


def lattice_sizes(design: Design) -> tuple[float, ...] | None:
    """Per-arm lattice sizes at the last look (inf when too large to compute), or None
    for a family without a lattice."""
    family = design.family
    if not family.lattice:
        return None
    sizes = []
    for j in range(len(design.arms)):
        try:
            size = float(family.lattice_size(design, j, design.looks.per_arm[-1][j]))
        except (ArithmeticError, ValueError):  # a quantile of a count beyond floats
            size = math.inf
        sizes.append(size if math.isfinite(size) else math.inf)
    return tuple(sizes)


def predictive_sizes(design: Design, sizes: tuple[float, ...]) -> tuple[float, ...]:
    """Estimated final-look lattice points the predictive probabilities of a truncating
    family need (``sizes`` when the rule has none): from each arm's highest interim
    count, twice the predictive mean of the remaining events plus ten of its Poisson sds.
    A prior far above the scenarios (gamma shape 10^6, rate 1) reaches far beyond them."""
    looks = design.looks
    family = design.family
    if not family.truncates or all(p is None for p in looks.futility_predictive):
        return sizes
    out = []
    for j, size in enumerate(sizes):
        reach = size
        n_end = looks.per_arm[-1][j]
        for k in range(looks.count - 1):
            n_k = looks.per_arm[k][j]
            edge = family.lattice_size(design, j, n_k) - 1
            post = family.posterior(design, j, n_k, np.array([edge]))
            if not hasattr(post, "mean"):
                continue  # a grid posterior: a prior with light tails on the log rate
            try:
                mean = float(np.ravel(post.mean())[0]) * design.endpoint.exposure * (
                    n_end - n_k)
            except (ArithmeticError, ValueError):
                mean = math.inf
            reach = max(reach, edge + 2 * mean + 10 * math.sqrt(mean) + 10)
        out.append(reach if math.isfinite(reach) else math.inf)
    return tuple(out)


def lattice_memory(design: Design) -> float:
    """Estimated working memory (bytes) of ``design``'s decision tables and exact engine
    (0 without a lattice)."""
    sizes = lattice_sizes(design)
    if sizes is None:
        return 0.0
    largest = max(sizes)
    memory = (math.prod(sizes) * (BYTES_PER_CELL_LOOK * design.looks.count + BYTES_PER_CELL)
              + 2 * 8 * largest * largest)
    if any(math.isinf(s) for s in sizes):
        return math.inf
    reach = predictive_sizes(design, sizes)
    if reach != sizes:
        # predictive tables (interim points x final points, with temporaries) and the
        # final success region on the larger lattice
        memory += sum(48 * s * r for s, r in zip(sizes, reach, strict=True))
        memory += 32 * math.prod(reach)
    return memory


def require_lattice_fits(design: Design, setting: str, key: str, reduce: str) -> None:
    """Raise a :class:`~octrial.errors.SettingsError` at ``setting: key`` when ``design``'s
    lattice (for example one extended to hold observed counts) exceeds the memory limit;
    ``reduce`` says what to reduce."""
    memory = lattice_memory(design)
    if memory > MEMORY_LIMIT:
        raise SettingsError(setting, [Problem(
            key, f"values whose count lattice fits the memory limit of "
            f"{MEMORY_LIMIT / 2**30:g} GiB ({reduce})",
            f"an estimated {memory / 2**30:.3g} GiB")])


def normal_grid_nodes(design: Design) -> float | None:
    """Estimated grid points of the exact normal engine at the first look (known sd), or
    None: the scenarios' spread in standard errors of the first look plus the engine's
    range either side, at its finer number of points per standard error."""
    from octrial.engines.exact_normal import POINTS_PER_SD, RANGE_SD, NormalRecursionEngine

    family = design.family
    if NormalRecursionEngine.unsupported(design):
        return None
    info = family.information(design, design.looks.per_arm[0])
    values = [row[0] - (row[1] if len(row) > 1 else 0.0) for row in design.scenarios.values]
    spread = (max(values) - min(values)) * math.sqrt(info)
    return 2 * POINTS_PER_SD * (spread + 2 * RANGE_SD)


def problems(design: Design) -> list[Problem]:
    """Every limit ``design`` exceeds, each naming what to reduce."""
    found = []
    looks, scenarios = design.looks.count, len(design.scenarios)
    sizes = lattice_sizes(design)
    if sizes is not None:
        cells = math.prod(sizes)
        largest = max(sizes)
        memory = lattice_memory(design)
        if memory > MEMORY_LIMIT:
            found.append(Problem(
                "looks.n", f"a design whose count lattice fits the memory limit of "
                f"{MEMORY_LIMIT / 2**30:g} GiB (reduce looks.n, the number of looks or, for "
                "counts, the largest true rate, the exposure or a prior mean far above the "
                "scenarios)",
                f"an estimated {memory / 2**30:.3g} GiB "
                f"({' x '.join(f'{s:.0f}' for s in sizes)} lattice points, {looks} looks)"))
        work = float(scenarios) * looks * cells * largest
        if work > LATTICE_WORK_LIMIT:
            found.append(Problem(
                "scenarios", f"at most {LATTICE_WORK_LIMIT:.0e} lattice operations (scenarios "
                "x looks x lattice points x largest per-arm lattice; reduce the scenarios, "
                "the looks or looks.n)", f"an estimated {work:.3g}"))
    nodes = normal_grid_nodes(design)
    if nodes is not None and design.simulation.method != "monte-carlo":
        memory = BYTES_PER_NODE * scenarios * nodes
        if memory > MEMORY_LIMIT:
            found.append(Problem(
                "scenarios", f"scenarios whose spread in standard errors fits the exact "
                f"normal engine's grid in the memory limit of {MEMORY_LIMIT / 2**30:g} GiB "
                "(reduce the spread of the scenarios or the number of scenarios, check "
                "endpoint.sd, or set simulation.method = 'monte-carlo')",
                f"an estimated {memory / 2**30:.3g} GiB ({nodes:.3g} grid points)"))
    if design.simulation.method != "exact":
        studies = float(design.simulation.replicates) * scenarios
        if studies > STUDIES_LIMIT:
            found.append(Problem(
                "simulation.replicates", f"at most {STUDIES_LIMIT:.0e} simulated studies in "
                "all (replicates x scenarios; reduce simulation.replicates or the scenarios)",
                f"{design.simulation.replicates} x {scenarios} = {studies:.3g}"))
    return found
