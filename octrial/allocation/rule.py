"""The allocation rule and its maths: probabilities for the next block of subjects.

Forms
-----
``fixed``
    The fixed ratio ``ratio`` over the arms still in the study (deterministic
    allocation is the special case of every adaptive rule before its burn-in).
``power``
    Each active treatment arm's share of the treatment subjects is proportional to
    ``Pr(best) ** power``.
``information``
    The same with the power growing with the information, ``c = n / (2 N)``, where ``n``
    is the number of subjects enrolled so far and ``N`` the maximum; the form of Thall &
    Wathen (2007), Eur. J. Cancer 43:859-866 (as the issue states it).

Control share and minimum
-------------------------
With a control arm, the control takes ``control_share`` of every block, or, when that
is not given, an equal share ``1 / (active treatment arms + 1)``. Every active treatment
arm receives at least ``minimum`` of the block (a share of all subjects, not of the
treatment subjects); the rest of the treatment share is split in proportion to the
adaptive weights among the arms above their minimum. Adaptation starts at the first
look with at least ``burn_in`` subjects enrolled; before it the fixed ratio applies.

The maths is one numba function (:func:`shares`), called by the simulation kernel and,
through :func:`next_allocation`, by interim decisions, so that both give the same
numbers.
"""

from __future__ import annotations

from dataclasses import dataclass

import numba
import numpy as np

from octrial.errors import Problem, SettingsError, show

FORMS = ("fixed", "power", "information")


@dataclass(frozen=True)
class AllocationRule:
    """How subjects are allocated to arms at each look.

    Attributes
    ----------
    form : {'fixed', 'power', 'information'}
        See the module notes.
    power : float
        The exponent ``c`` of ``Pr(best) ** c`` for ``form='power'`` (0 gives equal
        shares; 1 allocates in proportion to Pr(best)).
    control_share : float or None
        Fixed share of every block given to the control arm; None: an equal share.
    minimum : float
        Least share of a block any active treatment arm receives, in [0, 1).
    burn_in : int
        Subjects enrolled before adaptation starts (the fixed ratio applies until then).
    ratio : tuple of float or None
        Fixed allocation ratio over the arms (control first when there is one); None:
        the control share to the control and equal shares to the treatment arms, or
        equal shares when no control share is given.
    """

    form: str = "fixed"
    power: float = 1.0
    control_share: float | None = None
    minimum: float = 0.0
    burn_in: int = 0
    ratio: tuple[float, ...] | None = None

    def problems(self, treatments: int, control: bool) -> list[Problem]:
        """Every problem with this rule for ``treatments`` treatment arms.

        Parameters
        ----------
        treatments : int
            Number of treatment arms.
        control : bool
            Whether the design has a (shared) control arm.
        """
        found = []
        if self.form not in FORMS:
            found.append(Problem("form", "one of " + ", ".join(FORMS), show(self.form)))
        if not (np.isfinite(self.power) and self.power >= 0):
            found.append(Problem("power", "a number >= 0", show(self.power)))
        if self.control_share is not None:
            if not control:
                found.append(Problem("control_share", "no value (the design has no "
                                     "control arm)", show(self.control_share)))
            elif not 0 < self.control_share < 1:
                found.append(Problem("control_share", "a number in (0, 1)",
                                     show(self.control_share)))
        room = self._treatment_room(treatments, control)
        if not 0 <= self.minimum < 1:
            found.append(Problem("minimum", "a number in [0, 1)", show(self.minimum)))
        elif room is not None and self.minimum * treatments > room + 1e-12:
            found.append(Problem(
                "minimum", f"at most {room / treatments:.6g} (the treatment share "
                f"{room:.6g} split over {treatments} arms)", show(self.minimum)))
        if self.burn_in < 0:
            found.append(Problem("burn_in", "a whole number >= 0", show(self.burn_in)))
        arms = treatments + int(control)
        if self.ratio is not None and (
                len(self.ratio) != arms or not all(r > 0 for r in self.ratio)):
            found.append(Problem("ratio", f"{arms} positive numbers (control first)"
                                 if control else f"{arms} positive numbers",
                                 show(list(self.ratio))))
        return found

    def _treatment_room(self, treatments: int, control: bool) -> float | None:
        if not control:
            return 1.0
        if self.control_share is None:
            return treatments / (treatments + 1)
        if 0 < self.control_share < 1:
            return 1.0 - self.control_share
        return None

    def check(self, treatments: int, control: bool) -> None:
        """Raise :class:`~octrial.errors.SettingsError` naming every problem."""
        found = self.problems(treatments, control)
        if found:
            raise SettingsError("allocation", found)

    def codes(self, treatments: int, control: bool) -> tuple[int, float, float, float,
                                                            int, np.ndarray]:
        """The rule as the plain numbers :func:`shares` takes."""
        arms = treatments + int(control)
        if self.ratio is not None:
            ratio = np.asarray(self.ratio, float)
        elif control and self.control_share is not None:
            ratio = np.full(arms, (1.0 - self.control_share) / treatments)
            ratio[0] = self.control_share
        else:
            ratio = np.ones(arms)
        return (FORMS.index(self.form), float(self.power),
                -1.0 if self.control_share is None else float(self.control_share),
                float(self.minimum), int(self.burn_in), ratio)


@numba.njit(cache=True)
def shares(pr_best, active, control, form, power, control_share, minimum, burn_in,
           ratio, enrolled, maximum, out):  # pragma: no cover - compiled
    """Write the allocation probabilities of the next block into ``out``.

    ``pr_best[j]`` is treatment arm j's probability of being the best among the active
    treatment arms (the control's entry, index 0 when ``control``, is ignored);
    ``active`` flags the arms still enrolling. Dropped arms get 0.
    """
    arms = out.shape[0]
    first = 1 if control else 0
    for j in range(arms):
        out[j] = 0.0
    treated = 0
    for j in range(first, arms):
        if active[j]:
            treated += 1
    if form == 0 or enrolled < burn_in or enrolled == 0:
        # a stated control share holds in every block, the burn-in's included, so an
        # arm leaving passes its share to the other treatment arms, not to the control
        held_control = control and active[0] and treated > 0 and control_share >= 0
        start = first if held_control else 0
        total = 0.0
        for j in range(start, arms):
            if active[j]:
                total += ratio[j]
        room = 1.0 - control_share if held_control else 1.0
        if held_control:
            out[0] = control_share
        if total > 0:
            for j in range(start, arms):
                if active[j]:
                    out[j] = ratio[j] / total * room
        return
    control_part = 0.0
    if control and active[0]:
        if treated == 0:
            out[0] = 1.0
            return
        control_part = control_share if control_share >= 0 else 1.0 / (treated + 1)
        out[0] = control_part
    if treated == 0:
        return
    c = power if form == 1 else enrolled / (2.0 * maximum)
    room = 1.0 - control_part
    floor = minimum / room
    # weights of the arms not (yet) held at the floor; out[j] < 0 marks "held"
    for j in range(first, arms):
        if active[j]:
            out[j] = pr_best[j] ** c
    held = 0
    while True:
        free_mass = 1.0 - held * floor
        total = 0.0
        free = 0
        for j in range(first, arms):
            if active[j] and out[j] >= 0:
                total += out[j]
                free += 1
        changed = False
        for j in range(first, arms):
            if active[j] and out[j] >= 0:
                share = out[j] / total * free_mass if total > 0 else free_mass / free
                if share < floor:
                    out[j] = -1.0
                    held += 1
                    changed = True
        if not changed:
            break
    for j in range(first, arms):
        if active[j]:
            if out[j] < 0:
                out[j] = floor * room
            else:
                share = out[j] / total * free_mass if total > 0 else free_mass / free
                out[j] = share * room


def next_allocation(rule: AllocationRule, pr_best: np.ndarray, active: np.ndarray,
                    control: bool, enrolled: int, maximum: int) -> np.ndarray:
    """Allocation probabilities for the next block of subjects.

    Parameters
    ----------
    rule : AllocationRule
    pr_best : array of float
        Probability that each arm is the best among the active treatment arms (control
        first when ``control``; its entry is ignored).
    active : array of bool
        Arms still enrolling.
    control : bool
        Whether index 0 is a control arm.
    enrolled, maximum : int
        Subjects enrolled so far and the study's maximum.

    Returns
    -------
    numpy.ndarray
        One probability per arm, summing to 1 (0 for dropped arms).

    Examples
    --------
    >>> rule = AllocationRule(form="power", power=1.0, control_share=0.25)
    >>> next_allocation(rule, np.array([0.0, 0.6, 0.3, 0.1]), np.ones(4, bool),
    ...                 True, 40, 120).round(3).tolist()
    [0.25, 0.45, 0.225, 0.075]
    """
    treatments = len(pr_best) - int(control)
    rule.check(treatments, control)
    form, power, control_share, minimum, burn_in, ratio = rule.codes(treatments, control)
    out = np.zeros(len(pr_best))
    shares(np.asarray(pr_best, float), np.asarray(active, np.bool_), control, form, power,
           control_share, minimum, burn_in, ratio, int(enrolled), int(maximum), out)
    return out
