"""Calibration: thresholds, sample size and stage searches that meet type I error and power.

:func:`calibrate` is the entry point (the ``octrial calibrate`` command is a thin layer
over it). Layout:

* ``request``: the settings, checked once;
* ``nulls``: the composite null region on a grid;
* ``evaluator``: candidates evaluated through any engine, or the lattice fast path;
* ``variants`` and ``knobs``: candidate designs and the values calibration turns;
* ``tuning``: threshold calibration at one sample size (and grid searches);
* ``stages``: optimal and minimax multi-stage searches (Simon 1989 criteria);
* ``log``: every candidate examined (``calibration.csv``);
* ``core``: sizing, the choice, its check against the exact engine, the summary.
"""

from octrial.calibration.core import Calibration, calibrate
from octrial.calibration.request import Request, make_request

__all__ = ["Calibration", "Request", "calibrate", "make_request"]
