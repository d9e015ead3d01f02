"""The settings of ``octrial check``, checked once.

Every setting is validated in :class:`CheckSettings` and reported the same way as any
other bad input (a :class:`~octrial.errors.SettingsError`, the settings' names as keys; the
command line names its options instead).
"""

from __future__ import annotations

import secrets
from dataclasses import dataclass

import numpy as np

from octrial.design.reader import suggest
from octrial.errors import Problem, SettingsError, show

CHECKS = ("prior-predictive", "sbc", "sensitivity", "tail-accuracy", "conflict",
          "design-prior")
"""The checks ``octrial check`` runs, in order."""

SEED_BITS = 63

STREAMS = {"sbc": 1, "sensitivity": 2, "tail-accuracy": 3, "sbc-null": 4,
           "prior-predictive-analysis": 5, "prior-predictive-design": 6}
"""Each check's random stream: ``SeedSequence(seed, spawn_key=(stream,))``."""


@dataclass(frozen=True)
class CheckSettings:
    """What determines the checks' numbers (beside the design).

    Attributes
    ----------
    simulations : int
        Simulated studies M for simulation-based calibration and the sensitivity check.
    bins : int
        Histogram bins B for simulation-based calibration.
    draws : int
        Posterior draws L per simulated study for the rank statistic (L + 1 should be a
        multiple of ``bins`` so that every bin holds as many ranks).
    alpha : float
        A quantity fails simulation-based calibration when its Holm-adjusted p-value
        (over all quantities) is below this.
    band : float
        Level of the pointwise binomial band drawn on each histogram.
    repeats : int
        Repeated sets of posterior draws per size for the tail-accuracy check.
    seed : int or None
        Default ``simulation.seed``; when neither is given one is drawn and recorded.
    outcome_range : (float, float) or None
        Normal endpoints: the range one subject's outcome can take (for example (0, 100)
        for a score); prior predictive mass outside it is flagged as impossible.
    plausible : (float, float) or None
        The range of the observed effect a clinician finds plausible (on the scale of the
        observed effect in checks.json); replaces the family's default.
    checks : tuple of str
        Which of :data:`CHECKS` to run.
    """

    simulations: int = 4000
    bins: int = 20
    draws: int = 99
    alpha: float = 0.01
    band: float = 0.99
    repeats: int = 200
    seed: int | None = None
    outcome_range: tuple[float, float] | None = None
    plausible: tuple[float, float] | None = None
    checks: tuple[str, ...] = CHECKS

    def __post_init__(self) -> None:
        def ordered(pair: tuple[float, float] | None) -> bool:
            return pair is None or bool(len(pair) == 2 and np.isfinite(pair).all()
                                        and pair[0] < pair[1])

        checks = [
            ("simulations", self.simulations >= 20, "a whole number >= 20"),
            ("bins", 2 <= self.bins <= self.simulations // 5,
             "a whole number from 2 to `simulations` / 5 (at least 5 studies per bin)"),
            ("draws", self.draws >= 1, "a whole number >= 1"),
            ("alpha", 0 < self.alpha < 1, "a level in (0, 1)"),
            ("band", 0 < self.band < 1, "a level in (0, 1)"),
            ("repeats", self.repeats >= 20, "a whole number >= 20"),
            ("seed", self.seed is None or 0 <= self.seed < 2**SEED_BITS,
             "a whole number in [0, 2^63)"),
            ("outcome_range", ordered(self.outcome_range), "LOW:HIGH with LOW < HIGH"),
            ("plausible", ordered(self.plausible), "LOW:HIGH with LOW < HIGH"),
        ]
        problems = [Problem(name, expected, _found(getattr(self, name)))
                    for name, ok, expected in checks if not ok]
        problems += _checks_problems(self.checks)
        if problems:
            raise SettingsError("octrial check", problems)

    def with_seed(self, design_seed: int | None) -> CheckSettings:
        """These settings with the seed settled: this one, else the design's, else drawn."""
        from dataclasses import replace

        if self.seed is not None:
            return self
        seed = design_seed if design_seed is not None else secrets.randbits(SEED_BITS)
        return replace(self, seed=seed)


def _found(value: object) -> str:
    """A found setting in a message: a range as LOW:HIGH, as it is typed."""
    if isinstance(value, tuple) and len(value) == 2 and all(
            isinstance(v, int | float) for v in value):
        return f"{value[0]:g}:{value[1]:g}"
    return show(value)


def _checks_problems(names: tuple[str, ...]) -> list[Problem]:
    """What is wrong with the checks asked for (``checks``), in plain words."""
    expected = ("one or more of " + ", ".join(CHECKS[:-1]) + f" and {CHECKS[-1]}, "
                "separated by commas")
    if not names:
        return [Problem("checks", expected, "no check")]
    return [Problem("checks", expected, show(name), suggest(name, CHECKS))
            for name in names if name not in CHECKS]


def generator(seed: int | None, stream: str) -> np.random.Generator:
    """The random generator of one check (see :data:`STREAMS`), from the settled seed
    (:meth:`CheckSettings.with_seed`; without one the checks could not be repeated)."""
    if seed is None:
        raise ValueError("a check's random stream needs a settled seed (with_seed)")
    sequence = np.random.SeedSequence(seed, spawn_key=(STREAMS[stream],))
    return np.random.Generator(np.random.PCG64(sequence))
