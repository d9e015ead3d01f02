"""octrial: operating characteristics of Bayesian clinical-study designs.

The library behind the ``octrial`` command. Load a design file and evaluate it::

    import octrial
    design = octrial.load_design("designs/single-arm-response.toml")
    oc = octrial.evaluate(design)          # pandas DataFrame, one row per scenario

Calibrate thresholds, sample size or a multi-stage design, and average over a design
prior::

    result = octrial.calibrate(design, alpha=0.05, power=0.8, alternative=[0.4])
    octrial.assurance(design)              # None without a design prior on every arm
"""

from octrial._version import __version__
from octrial.calibration import Calibration, calibrate
from octrial.design import Design, load_design
from octrial.design_prior import Assurance, assurance
from octrial.errors import DesignError, InputError, SettingsError
from octrial.evaluation import Evaluation, compute, evaluate

__all__ = ["Assurance", "Calibration", "Design", "DesignError", "Evaluation", "InputError",
           "SettingsError", "__version__", "assurance", "calibrate", "compute", "evaluate",
           "load_design"]
