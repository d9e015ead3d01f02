"""octrial: operating characteristics of Bayesian clinical-study designs.

The library behind the ``octrial`` command. Load a design file and evaluate it::

    import octrial
    design = octrial.load_design("designs/single-arm-response.toml")
    oc = octrial.evaluate(design)          # pandas DataFrame, one row per scenario
"""

from octrial._version import __version__
from octrial.design import Design, load_design
from octrial.errors import DesignError, InputError
from octrial.evaluation import Evaluation, compute, evaluate

__all__ = ["Design", "DesignError", "Evaluation", "InputError", "__version__", "compute",
           "evaluate", "load_design"]
