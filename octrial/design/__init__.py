"""Design files: the immutable design value and the TOML loader that validates it."""

from octrial.design.load import load_design, parse_design
from octrial.design.model import Arm, Design, Hypothesis, Looks, Scenarios, Simulation

__all__ = ["Arm", "Design", "Hypothesis", "Looks", "Scenarios", "Simulation", "load_design",
           "parse_design"]
