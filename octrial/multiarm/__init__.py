"""Designs with several treatment arms against a shared control or a benchmark.

The design model (:mod:`.model`), its reading from a design file (:mod:`.load`), the
per-arm decision tables (:mod:`.tables`), the posterior probability that an arm is the
best (:mod:`.best`) and the Monte Carlo engine (:mod:`.kernel`, :mod:`.engine`).
"""

from octrial.multiarm.load import load_multiarm, parse_multiarm
from octrial.multiarm.model import Allocation, MultiArmDesign, MultiArmLooks, Selection

__all__ = ["Allocation", "MultiArmDesign", "MultiArmLooks", "Selection", "load_multiarm",
           "parse_multiarm"]
