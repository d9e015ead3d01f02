"""Figures render for one and two arms and for any endpoint's parameter (they read only
oc.csv columns), and use greys only, so nothing depends on colour."""

from __future__ import annotations

import base64
import io
import re
from types import SimpleNamespace
from xml.etree import ElementTree

import numpy as np
import pandas as pd
import pytest
from matplotlib import image

from octrial.reporting.figures import (
    FIGURES,
    WIDTH,
    PlotFacts,
    _stack_layers,
    sawtooth,
)


def synthetic_oc(truths: dict[str, np.ndarray], looks: int, replicates: int,
                 seed: int = 1) -> pd.DataFrame:
    """An oc.csv-shaped table with consistent look probabilities (rows sum to 1)."""
    rng = np.random.default_rng(seed)
    rows = len(next(iter(truths.values())))
    outcome = rng.dirichlet(np.ones(2 * looks), size=rows)
    eff, fut = outcome[:, :looks], outcome[:, looks:]
    n = np.linspace(20, 100, looks)
    stop = eff + fut
    expected = stop @ n
    sd = np.sqrt(np.clip(stop @ n**2 - expected**2, 0, None))
    p = eff.sum(axis=1)
    oc = pd.DataFrame({"scenario": np.arange(1, rows + 1),
                       **{f"true_{k}": v for k, v in truths.items()}})
    oc["is_null"] = False
    oc["prob_success"] = p
    oc["prob_success_se"] = np.sqrt(p * (1 - p) / replicates) if replicates else 0.0
    oc["expected_n"] = expected
    oc["expected_n_se"] = sd / np.sqrt(replicates) if replicates else 0.0
    oc["sd_n"] = sd
    for k in range(looks):
        oc[f"look{k + 1}_stop_efficacy"] = eff[:, k]
        oc[f"look{k + 1}_stop_futility"] = fut[:, k]
    oc["method"] = "monte-carlo" if replicates else "exact"
    oc["replicates"] = replicates
    return oc


def facts(x: str, label: str, looks: int, group: str | None = None,
          null_at: float | None = None, alpha: float | None = 0.025) -> PlotFacts:
    return PlotFacts(x, label, group, "control mean" if group else "", null_at,
                     tuple(int(v) for v in np.linspace(20, 100, looks)), alpha, 0.03)


control = np.repeat(np.linspace(1.0, 10.0, 10), 4)
CASES = {
    # A count endpoint, one arm, lower is better: events per unit of exposure.
    "count-one-arm": (synthetic_oc({"treatment": np.linspace(0.5, 3.0, 11)}, 3, 0),
                      facts("true_treatment", "true rate (events per unit of exposure)", 3,
                            null_at=1.5)),
    # A normal endpoint, one arm, simulated (band drawn), five looks, negative values.
    "normal-one-arm-simulated": (
        synthetic_oc({"treatment": np.linspace(-2.0, 2.0, 21)}, 5, 5000),
        facts("true_treatment", "true mean (units of the endpoint)", 5, null_at=0.0)),
    # Two arms on a ratio scale with ten control values (panels are subset to nine).
    "two-arm-ratio-ten-controls": (
        synthetic_oc({"treatment": control * np.tile([0.5, 0.7, 0.9, 1.0], 10),
                      "control": control,
                      "effect": np.tile([0.5, 0.7, 0.9, 1.0], 10)}, 2, 0),
        facts("true_effect", "true ratio of rates, treatment vs control", 2, "true_control")),
    # Two arms given as a control x treatment grid, no effect column, no alpha stated.
    "two-arm-grid": (
        synthetic_oc({"treatment": np.tile([0.2, 0.3, 0.4], 2),
                      "control": np.repeat([0.2, 0.3], 3)}, 3, 0),
        facts("true_effect", "true difference in rate", 3, "true_control", 0.0, None)),
    # A single scenario.
    "one-scenario": (synthetic_oc({"treatment": np.array([0.3])}, 2, 0),
                     facts("true_treatment", "true rate", 2, null_at=0.2)),
}


def decode(uri: str) -> tuple[str, bytes]:
    head, payload = uri.split(",", 1)
    return head, base64.b64decode(payload)


def grey_only_svg(svg: str) -> bool:
    colours = re.findall(r"#([0-9a-fA-F]{6})\b", svg)
    return all(c[0:2] == c[2:4] == c[4:6] for c in colours) and colours


@pytest.mark.parametrize("case", CASES)
@pytest.mark.parametrize("build", FIGURES[:3], ids=lambda f: f.__name__)
def test_figure_renders_in_grey(case, build) -> None:
    oc, plot = CASES[case]
    figure = build(SimpleNamespace(oc=oc, calibration=None), plot)
    assert figure is not None and figure.caption and figure.alt
    head, data = decode(figure.uri)
    if head.startswith("data:image/svg+xml"):
        root = ElementTree.fromstring(data)
        assert root.tag.endswith("svg")
        assert float(root.get("width").removesuffix("pt")) == pytest.approx(WIDTH * 72)
        assert grey_only_svg(data.decode())
    else:
        assert head.startswith("data:image/png")
        pixels = image.imread(io.BytesIO(data))
        assert pixels.shape[1] > 1000 and pixels[..., :3].std() > 0.05
        rgb = pixels[..., :3]
        assert np.abs(rgb - rgb.mean(axis=2, keepdims=True)).max() < 0.02


def test_power_curve_band_only_when_simulated() -> None:
    simulated = FIGURES[0](SimpleNamespace(oc=CASES["normal-one-arm-simulated"][0]),
                           CASES["normal-one-arm-simulated"][1])
    exact = FIGURES[0](SimpleNamespace(oc=CASES["count-one-arm"][0]),
                       CASES["count-one-arm"][1])
    assert "Monte Carlo interval" in simulated.caption
    assert "Monte Carlo" not in exact.caption


def test_stacking_order_puts_success_below_failure() -> None:
    layers = [column for column, *_ in _stack_layers(3)]
    assert layers == ["look1_stop_efficacy", "look2_stop_efficacy", "look3_stop_efficacy",
                      "look3_stop_futility", "look2_stop_futility", "look1_stop_futility"]


def test_sawtooth_needs_a_sample_size_search() -> None:
    plot = CASES["count-one-arm"][1]
    thresholds_only = pd.DataFrame({"threshold": [0.9, 0.95], "max_type1_error": [0.06, 0.03]})
    assert sawtooth(SimpleNamespace(calibration=None), plot) is None
    assert sawtooth(SimpleNamespace(calibration=thresholds_only), plot) is None
    sizes = pd.DataFrame({"n": np.arange(10, 40), "power": np.linspace(0.3, 0.9, 30)})
    assert sawtooth(SimpleNamespace(calibration=sizes), plot) is not None


def test_check_figures_render_in_grey_from_a_check_record() -> None:
    """The SBC histograms and the sensitivity scatter draw from checks.json and
    sensitivity.csv as written; without an octrial check record they are absent."""
    from octrial.checks import CheckSettings, check
    from octrial.checks.files import plain
    from octrial.reporting.figures import sbc_histograms, sensitivity_scatter
    from tests.helpers import TWO_ARM, build

    out = check(build(TWO_ARM), CheckSettings(simulations=100, bins=5, draws=49, seed=2,
                                              checks=("sbc", "sensitivity")))
    data = SimpleNamespace(checks=plain(out.record), sensitivity=out.sensitivity)
    plot = facts("true_effect", "true difference in rate", 2, "true_control")
    for build_figure in (sbc_histograms, sensitivity_scatter):
        figure = build_figure(data, plot)
        head, png = decode(figure.uri)
        assert head == "data:image/png;base64"
        pixels = image.imread(io.BytesIO(png))[..., :3]
        assert np.allclose(pixels[..., 0], pixels[..., 1]) and np.allclose(
            pixels[..., 1], pixels[..., 2])
        assert figure.name.startswith("checks-")
        assert build_figure(SimpleNamespace(checks={"sbc": []}, sensitivity=None),
                            plot) is None
