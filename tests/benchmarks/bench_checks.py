"""Benchmark: the workflow checks (`octrial check`): run times, speed against naive
references, and the power and false-alarm rate of simulation-based calibration (SBC).

Run:  python tests/benchmarks/bench_checks.py [--quick]

1. Every demo design checked with the default settings (M = 4000 studies): wall time per
   check and in total (the figures are not included; `octrial check` adds about a second
   for them).
2. SBC against naive references that compute each study's posterior CDF at the truth in
   a Python loop with scipy: one arm (scipy.stats.beta per study) and two arms
   (scipy.integrate.quad of f_C(u) F_T(u + d) per study, timed on 200 studies). Each
   reference must give the same values (max difference printed) before its time counts.
3. SBC power against a coarse grid: a one-arm logit-normal design (n = 50, 100, 200)
   whose grid has 101 (the fewest a design file allows), 81 and 61 nodes; the share of
   seeds whose SBC fails, for M = 1000, 2000 and 4000 (100 seeds each; 30 with --quick).
4. False alarms: the share of seeds whose SBC fails for correct engines (the demo count
   design, closed form, and the logit-normal design on the default grid), at M = 4000.
"""

from __future__ import annotations

import dataclasses
import math
import sys
import time

import numpy as np
from scipy import integrate, stats

import octrial
from octrial.checks import CheckSettings, check
from octrial.checks.model import model_for
from octrial.checks.sbc import run_sbc
from octrial.design.load import parse_design
from octrial.design.model import Source
from octrial.endpoints import grid_family

QUICK = "--quick" in sys.argv
SEEDS = 30 if QUICK else 100
DEMOS = ("single-arm-response", "two-arm-randomised", "single-arm-event-rate",
         "two-arm-continuous-score", "borrowed-control-response", "single-arm-event-free",
         "two-arm-event-driven")
LOGIT = {
    "schema": 1, "name": "bench-logit-normal",
    "endpoint": {"type": "binary", "better": "higher"},
    "hypothesis": {"benchmark": 0.2},
    "arms": {"treatment": {"prior": {"distribution": "logit-normal", "logit_mean": -1.4,
                                     "logit_sd": 1.0}}},
    "looks": {"n": [50, 100, 200], "efficacy": [0.999, 0.99, 0.95], "futility": 0.05},
    "scenarios": {"treatment": [0.2, 0.3]},
}


def run_times() -> None:
    print("1. octrial check on the demo designs (M = 4000, B = 20, L = 99)")
    for name in DEMOS:
        design = octrial.load_design(f"designs/{name}.toml")
        tic = time.perf_counter()
        out = check(design)
        total = time.perf_counter() - tic
        parts = ", ".join(f"{k} {v:.2f}" for k, v in out.record["timings_seconds"].items())
        verdicts = [v["verdict"] for v in out.record["verdicts"]
                    if v["check"] == "simulation-based calibration"]
        print(f"   {name:28s} {total:6.2f} s  ({parts})  SBC: "
              f"{verdicts.count('pass')} pass, {verdicts.count('fail')} fail")


def naive_references() -> None:
    print("2. SBC against naive per-study scipy loops")
    design = octrial.load_design("designs/single-arm-response.toml")
    model = model_for(design)
    settings = CheckSettings(seed=1)
    tic = time.perf_counter()
    result = run_sbc(model, settings)
    ours = time.perf_counter() - tic
    values = result.values
    final = values[(values["look"] == 3) & (values["statistic"] == "cdf")]
    # the naive loop needs each study's responses: recover them from the same generator
    rng = np.random.Generator(np.random.PCG64(np.random.SeedSequence(1, spawn_key=(1,))))
    truths = model.draw_truths(rng, settings.simulations, "analysis")
    data = model.simulate(rng, truths)
    x = data.stats[-1, 0]
    tic = time.perf_counter()
    naive = np.array([stats.beta(0.4 + xi, 1.6 + 45 - xi).cdf(t)
                      for xi, t in zip(x, truths[:, 0], strict=True)])
    loop = time.perf_counter() - tic
    print(f"   one arm, 3 looks, M = 4000: octrial {ours:.3f} s for every look and the "
          f"ranks; naive loop {loop:.3f} s for the final look alone "
          f"(max difference {np.max(np.abs(naive - final['value'].to_numpy())):.1e}; "
          f"ratio {loop / ours * 3:.0f}x per look)")
    design = octrial.load_design("designs/two-arm-randomised.toml")
    model = model_for(design)
    tic = time.perf_counter()
    result = run_sbc(model, settings)
    ours = time.perf_counter() - tic
    values = result.values
    final = values[(values["look"] == 2) & (values["statistic"] == "cdf")
                   & (values["quantity"] == "difference")].head(200)
    rng = np.random.Generator(np.random.PCG64(np.random.SeedSequence(1, spawn_key=(1,))))
    truths = model.draw_truths(rng, settings.simulations, "analysis")
    data = model.simulate(rng, truths)
    xt, xc = data.stats[-1, 0, :200], data.stats[-1, 1, :200]
    tic = time.perf_counter()
    naive = []
    for i in range(200):
        t_post, c_post = stats.beta(1 + xt[i], 101 - xt[i]), stats.beta(1 + xc[i], 101 - xc[i])
        d = truths[i, 0] - truths[i, 1]
        lo, hi = max(0.0, -d), min(1.0, 1.0 - d)
        value = integrate.quad(lambda u, t=t_post, c=c_post, d=d: c.pdf(u) * t.cdf(u + d),
                               lo, hi, epsabs=1e-12, limit=200)[0]
        if d > 0:
            value += c_post.sf(1.0 - d)  # control rates above 1 - d: p_T - p_C <= d surely
        naive.append(value)
    loop = (time.perf_counter() - tic) / 200 * settings.simulations
    diff = np.max(np.abs(np.array(naive) - final["value"].to_numpy()))
    print(f"   two arms, 2 looks, M = 4000: octrial {ours:.2f} s (both looks, per-arm and "
          f"rank quantities); naive quad loop {loop:.1f} s for one look (timed on 200 "
          f"studies; max difference {diff:.1e}); ratio {loop / ours * 2:.0f}x per look")


def logit_design(points: int):
    design = parse_design(LOGIT, Source("bench", "", ""))
    return dataclasses.replace(design, simulation=dataclasses.replace(
        design.simulation, grid_points=points))


def power() -> None:
    print(f"3. SBC power against a coarse grid ({SEEDS} seeds per cell)")
    for points in (101, 81, 61):
        design = logit_design(points)
        spread = grid_family.spread_in_steps(design)["treatment"]
        cells = []
        for m in (1000, 2000, 4000):
            model = model_for(design)
            fails = [run_sbc(model, CheckSettings(seed=s, simulations=m)).record["verdict"]
                     == "fail" for s in range(SEEDS)]
            cells.append(f"M = {m}: {np.mean(fails):.2f}")
        print(f"   {points:4d} nodes (narrowest posterior sd "
              f"{spread['narrowest_posterior_sd_steps']:.2f} steps): " + ", ".join(cells))


def false_alarms() -> None:
    print(f"4. False alarms of correct engines at M = 4000 ({SEEDS * 2} seeds)")
    for name, design in (("single-arm-event-rate (closed form)",
                          octrial.load_design("designs/single-arm-event-rate.toml")),
                         ("logit-normal, 4001 nodes (grid)", logit_design(4001))):
        model = model_for(design)
        fails = [run_sbc(model, CheckSettings(seed=s)).record["verdict"] == "fail"
                 for s in range(SEEDS * 2)]
        rate = np.mean(fails)
        print(f"   {name}: {rate:.3f} (binomial SE {math.sqrt(0.01 * 0.99 / len(fails)):.3f} "
              "around the 0.01 bound)")


if __name__ == "__main__":
    run_times()
    naive_references()
    power()
    false_alarms()
