"""Benchmark: simulated three-look single-arm studies per second, per core.

Run:  python tests/benchmarks/bench_monte_carlo.py           (about a minute)
      python tests/benchmarks/bench_monte_carlo.py --memory  (adds the 200 x 10^6 grid)

Design: one arm, Beta(1, 1) prior, benchmark 0.2, looks at 15, 30, 45 subjects,
efficacy if Pr(p > 0.2 | data) >= 0.999 / 0.995 / 0.95, futility if < 0.05 at the interim
looks; true rate 0.3. Compared in one run, all on one core:

* (a) naive: a Python loop over studies and looks calling scipy.stats (binom.rvs,
  beta.sf) per study, as a hand-written script does;
* (b) vectorised: numpy binomial draws for all studies at once and scipy's incomplete
  beta on the whole (studies x looks) array, in batches;
* the cost of drawing the binomial random numbers alone (numpy, 3 per study);
* octrial's table kernel (random words + kernel), and the whole engine end to end
  (one scenario: tables, batches, seeding, summaries); and, evaluating every posterior
  probability per study, the generic study loop (``kernel='general'``) beside the
  former numba general kernel kept as a test reference (tests/references).

Targets (issue 3): >= 1000x (a), >= 20x (b), within a small factor of the binomial
draws alone. All three estimates of P(success) are printed so they can be compared.

Second table, count and normal endpoints: each of octrial's kernels against a
vectorised numpy/scipy implementation of the same design written here (all studies of a
batch at once; posteriors with scipy.special), in studies per second on one core, with
both estimates of P(success) (and the exact value where an exact engine exists):

* count, one arm, 3 looks (Poisson, gamma prior): table kernel, generic study loop and
  the reference numba kernel against numpy Poisson draws and ``scipy.special.gammainc``;
* normal, known sd, two arms, 3 looks with predictive futility: the general kernel
  against numpy normal draws and closed-form posterior and predictive probabilities;
* normal, unknown sd, one arm, 3 looks: the general kernel against numpy normal and
  chi-square draws and ``scipy.special.stdtr``; also with predictive futility (octrial
  only: the derived predictive probability has no short vectorised form);
* normal, unknown sd, two arms, 2 looks: the general kernel (Behrens-Fisher quadrature)
  against the same probability by a fixed 321-node trapezoidal rule in numpy; also with
  predictive futility (octrial only: 4096 quasi-Monte Carlo points per study and look).
With --memory, a grid of 200 scenarios x 10^6 replicates runs in a fresh process and its
peak resident memory is reported beside the memory an unbatched run would need for the
random numbers alone.
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import time

import numpy as np
from scipy import special, stats

from octrial.design.load import parse_design
from octrial.design.model import Source
from octrial.engines import MonteCarloSettings
from octrial.engines.monte_carlo import batch_generator
from octrial.errors import InputError
from octrial.evaluation import compute
from octrial.rules.estimates import lattice_estimates
from octrial.rules.lattice import build_rule
from octrial.simulation.generic import StudyLoop
from octrial.simulation.lattice import LatticeSimulator, lattice_plan
from tests.references.binary_kernel import BinarySimulator
from tests.references.count_kernel import CountSimulator

LOOKS = (15, 30, 45)
EFFICACY = (0.999, 0.995, 0.95)
FUTILITY = 0.05
P0, TRUTH = 0.2, 0.3
DESIGN = {
    "schema": 1, "name": "bench-mc",
    "endpoint": {"type": "binary", "better": "higher"},
    "hypothesis": {"benchmark": P0},
    "arms": {"treatment": {"prior": {"distribution": "beta", "a": 1, "b": 1}}},
    "looks": {"n": list(LOOKS), "efficacy": list(EFFICACY), "futility": FUTILITY},
    "scenarios": {"treatment": [TRUTH]},
    "simulation": {"seed": 1},
}


def design(data=DESIGN):
    return parse_design(data, Source("bench.toml", "", ""))


def naive(studies: int, seed: int) -> float:
    rng = np.random.default_rng(seed)
    successes = 0
    for _ in range(studies):
        x, previous = 0, 0
        for k, n in enumerate(LOOKS):
            x += stats.binom.rvs(n - previous, TRUTH, random_state=rng)
            previous = n
            b = stats.beta.sf(P0, 1 + x, 1 + n - x)
            if b >= EFFICACY[k]:
                successes += 1
                break
            if k < len(LOOKS) - 1 and b < FUTILITY:
                break
    return successes / studies


def vectorised(studies: int, seed: int, batch: int = 200_000) -> float:
    rng = np.random.default_rng(seed)
    n = np.array(LOOKS)
    successes = 0
    for start in range(0, studies, batch):
        size = min(batch, studies - start)
        x = np.cumsum(rng.binomial(np.diff(n, prepend=0), TRUTH, size=(size, len(n))), axis=1)
        b = special.betaincc(1 + x, 1 + n - x, P0)
        efficacy = b >= np.array(EFFICACY)
        futility = np.zeros_like(efficacy)
        futility[:, :-1] = b[:, :-1] < FUTILITY
        futility[:, -1] = ~efficacy[:, -1]
        stop = efficacy | futility
        first = np.argmax(stop, axis=1)
        successes += int(efficacy[np.arange(size), first].sum())
    return successes / studies


def binomial_draws(studies: int, seed: int, batch: int = 200_000) -> float:
    rng = np.random.default_rng(seed)
    sizes = np.diff(np.array(LOOKS), prepend=0)
    total = 0
    for start in range(0, studies, batch):
        size = min(batch, studies - start)
        total += int(rng.binomial(sizes, TRUTH, size=(size, len(sizes)))[:, 0].sum())
    return total


def table_kernel(studies: int, seed: int, batch: int = 50_000) -> float:
    d = design()
    rule, estimates = build_rule(d), lattice_estimates(d)
    simulator = LatticeSimulator(d, lattice_plan(d, rule, estimates), (TRUTH,), estimates, 0.95)
    tally = None
    for b, start in enumerate(range(0, studies, batch)):
        part = simulator.simulate(batch_generator(seed, 0, b), min(batch, studies - start))
        tally = part if tally is None else tally + part
    return tally.efficacy.sum() / studies


def simulated(simulator, studies: int, seed: int, batch: int = 50_000) -> float:
    tally = None
    for b, start in enumerate(range(0, studies, batch)):
        part = simulator.simulate(batch_generator(seed, 0, b), min(batch, studies - start))
        tally = part if tally is None else tally + part
    return tally.efficacy.sum() / studies


def generic_loop(studies: int, seed: int) -> float:
    return simulated(StudyLoop(design(), (TRUTH,), 0.95), studies, seed)


def reference_kernel(studies: int, seed: int) -> float:
    return simulated(BinarySimulator(design(), (TRUTH,), 0.95), studies, seed)


def engine(studies: int, seed: int) -> float:
    oc = compute(design(), "monte-carlo", MonteCarloSettings(replicates=studies, seed=seed)).oc
    return float(oc["prob_success"].iloc[0])


def rate(function, studies: int, repeat: int = 3) -> tuple[float, float]:
    best, value = np.inf, None
    for r in range(repeat):
        start = time.perf_counter()
        value = function(studies, r + 1)
        best = min(best, time.perf_counter() - start)
    return studies / best, value


def grid_memory() -> dict:
    """Run in a fresh process: 200 scenarios x 10^6 replicates, peak RSS."""
    data = dict(DESIGN, scenarios={"treatment": {"from": 0.004, "to": 0.999, "step": 0.005}},
                simulation={"seed": 1, "replicates": 1_000_000})
    d = design(data)
    compute(design(), "monte-carlo", MonteCarloSettings(replicates=1000))  # warm-up
    before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    start = time.perf_counter()
    oc = compute(d, "monte-carlo").oc
    seconds = time.perf_counter() - start
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return {"scenarios": len(oc), "replicates": int(oc["replicates"].iloc[0]),
            "seconds": seconds, "rss_before_mb": before / 1024, "rss_peak_mb": peak / 1024}


COUNT = {
    "schema": 1, "name": "bench-count",
    "endpoint": {"type": "count", "exposure": 1.0, "better": "lower"},
    "hypothesis": {"benchmark": 1.5},
    "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 1.5, "rate": 1.0}}},
    "looks": {"n": [50, 100, 150], "efficacy": [0.999, 0.995, 0.975], "futility": 0.05},
    "scenarios": {"treatment": [1.3]},
    "simulation": {"seed": 1},
}
KNOWN = {
    "schema": 1, "name": "bench-known-sd",
    "endpoint": {"type": "normal", "sd": 12.0, "better": "higher"},
    "hypothesis": {"comparison": "difference", "margin": 0.0,
                   "prior": {"distribution": "normal", "mean": 0.0, "sd": 6.0}},
    "arms": {"treatment": {}, "control": {}},
    "looks": {"n": [120, 240, 360], "efficacy": [0.9995, 0.995, 0.975],
              "futility_predictive": 0.05},
    "scenarios": {"control": [40.0], "effect": [3.0]},
    "simulation": {"seed": 1},
}
UNKNOWN = {
    "schema": 1, "name": "bench-unknown-sd",
    "endpoint": {"type": "normal", "sd": "unknown", "true_sd": 2.0, "better": "higher"},
    "hypothesis": {"benchmark": 0.0},
    "arms": {"treatment": {"prior": {"distribution": "normal-inverse-gamma", "mean": 0.0,
                                     "mean_n": 1.0, "shape": 2.0, "scale": 8.0}}},
    "looks": {"n": [20, 40, 60], "efficacy": [0.999, 0.99, 0.975], "futility": [0.05, 0.1]},
    "scenarios": {"treatment": [0.4]},
    "simulation": {"seed": 1},
}
UNKNOWN_TWO = {
    "schema": 1, "name": "bench-unknown-sd-two",
    "endpoint": {"type": "normal", "sd": "unknown", "true_sd": 2.0, "better": "higher"},
    "hypothesis": {"comparison": "difference", "margin": 0.0},
    "arms": {arm: {"prior": {"distribution": "normal-inverse-gamma", "mean": 0.0,
                             "mean_n": 1.0, "shape": 2.0, "scale": 8.0}}
             for arm in ("treatment", "control")},
    "looks": {"n": [80, 160], "efficacy": [0.995, 0.975], "futility": 0.1},
    "scenarios": {"control": [1.0], "effect": [0.8]},
    "simulation": {"seed": 1},
}


def first_stops(efficacy: np.ndarray, futility: np.ndarray) -> int:
    """Successes among studies (rows) with per-look efficacy and futility flags."""
    futility = futility.copy()
    futility[:, -1] = ~efficacy[:, -1]
    first = np.argmax(efficacy | futility, axis=1)
    return int(efficacy[np.arange(len(first)), first].sum())


def kernel_rate(data: dict, kernel: str = "auto"):
    """octrial's engine on one scenario of ``data`` (studies/s, P(success))."""
    d = design(data)

    def run(studies: int, seed: int) -> float:
        settings = MonteCarloSettings(replicates=studies, seed=seed, kernel=kernel)
        return float(compute(d, "monte-carlo", settings).oc["prob_success"].iloc[0])
    return run


def count_vectorised(studies: int, seed: int, batch: int = 200_000) -> float:
    rng = np.random.default_rng(seed)
    n = np.array(COUNT["looks"]["n"])
    a, b, rate0, truth = 1.5, 1.0, 1.5, 1.3
    successes = 0
    for start in range(0, studies, batch):
        size = min(batch, studies - start)
        x = np.cumsum(rng.poisson(truth * np.diff(n, prepend=0), size=(size, n.size)), axis=1)
        benefit = special.gammainc(a + x, (b + n) * rate0)
        successes += first_stops(benefit >= np.array(COUNT["looks"]["efficacy"]) - 1e-12,
                                 benefit < COUNT["looks"]["futility"] - 1e-12)
    return successes / studies


def known_vectorised(studies: int, seed: int, batch: int = 200_000) -> float:
    from octrial.rules.normal import build_normal_rule

    d = design(KNOWN)
    final_upper = build_normal_rule(d).looks[-1].upper
    rng = np.random.default_rng(seed)
    per_arm = np.array(d.looks.per_arm, dtype=float)
    m = np.diff(per_arm, axis=0, prepend=0.0)
    sd, p0 = 12.0, 1 / 36.0
    info = 1 / (sd**2 * (1 / per_arm[:, 0] + 1 / per_arm[:, 1]))
    efficacy_at = np.array(KNOWN["looks"]["efficacy"]) - 1e-12
    successes = 0
    for start in range(0, studies, batch):
        size = min(batch, studies - start)
        means = np.array([43.0, 40.0]) + sd * rng.standard_normal((size, 3, 2)) / np.sqrt(m)
        est = np.cumsum(m * means, axis=1) / per_arm
        score = info * (est[:, :, 0] - est[:, :, 1])
        precision = p0 + info
        mean = score / precision
        benefit = special.ndtr(mean * np.sqrt(precision))
        d_info = info[-1] - info
        pp = special.ndtr((score + mean * d_info - final_upper)
                          / np.sqrt(d_info + d_info**2 / precision + 1e-300))
        futility = pp < 0.05 - 1e-12
        successes += first_stops(benefit >= efficacy_at, futility)
    return successes / studies


def unknown_vectorised(studies: int, seed: int, batch: int = 200_000) -> float:
    rng = np.random.default_rng(seed)
    n = np.array(UNKNOWN["looks"]["n"], dtype=float)
    m = np.diff(n, prepend=0.0)
    m0, k0, a0, b0, sd = 0.0, 1.0, 2.0, 8.0, 2.0
    successes = 0
    for start in range(0, studies, batch):
        size = min(batch, studies - start)
        means = 0.4 + sd * rng.standard_normal((size, 3)) / np.sqrt(m)
        squares = sd**2 * rng.chisquare(np.maximum(m - 1, 1e-300), size=(size, 3))
        total = np.cumsum(m * means, axis=1)
        ss = np.cumsum(squares, axis=1) + np.cumsum(m * means**2, axis=1) - total**2 / n
        k, a = k0 + n, a0 + n / 2
        bn = b0 + ss / 2 + k0 * n * (total / n - m0) ** 2 / (2 * k)
        z = ((k0 * m0 + total) / k) / np.sqrt(bn / (a * k))
        benefit = special.stdtr(2 * a, z)
        successes += first_stops(benefit >= np.array(UNKNOWN["looks"]["efficacy"]) - 1e-12,
                                 benefit < np.array([0.05, 0.1, np.nan]) - 1e-12)
    return successes / studies


def unknown_two_vectorised(studies: int, seed: int, batch: int = 20_000) -> float:
    rng = np.random.default_rng(seed)
    n = np.array(UNKNOWN_TWO["looks"]["n"], dtype=float) / 2
    m = np.diff(n, prepend=0.0)
    m0, k0, a0, b0, sd = 0.0, 1.0, 2.0, 8.0, 2.0
    x = np.linspace(-8.0, 8.0, 321)
    t, h = np.sinh(x), x[1] - x[0]
    successes = 0
    for start in range(0, studies, batch):
        size = min(batch, studies - start)
        loc, scale, nu = [], [], []
        for truth in (1.8, 1.0):
            means = truth + sd * rng.standard_normal((size, 2)) / np.sqrt(m)
            squares = sd**2 * rng.chisquare(m - 1, size=(size, 2))
            total = np.cumsum(m * means, axis=1)
            ss = np.cumsum(squares, axis=1) + np.cumsum(m * means**2, axis=1) - total**2 / n
            k, a = k0 + n, a0 + n / 2
            bn = b0 + ss / 2 + k0 * n * (total / n - m0) ** 2 / (2 * k)
            loc.append((k0 * m0 + total) / k)
            scale.append(np.sqrt(bn / (a * k)))
            nu.append(2 * a)
        benefit = np.empty((size, 2))
        for look in range(2):
            # Pr(T - C > 0) = E over the control t of the treatment survival function
            weights = h * stats.t.pdf(t, nu[1][look]) * np.cosh(x)
            y = loc[1][:, look, None] + scale[1][:, look, None] * t[None, :]
            survival = special.stdtr(nu[0][look], (loc[0][:, look, None] - y)
                                     / scale[0][:, look, None])
            benefit[:, look] = survival @ weights
        successes += first_stops(benefit >= np.array([0.995, 0.975]) - 1e-12,
                                 benefit < np.array([0.1, np.nan]) - 1e-12)
    return successes / studies


def count_reference(studies: int, seed: int) -> float:
    """The former numba general kernel for counts (tests/references), one scenario."""
    d = design(COUNT)
    return simulated(CountSimulator(d, (1.3,), 0.95), studies, seed)


def endpoint_rows() -> None:
    """The second table (see module docstring)."""
    unknown_pp = dict(UNKNOWN, looks={**UNKNOWN["looks"], "futility_predictive": [0.1, 0.2]})
    unknown_two_pp = dict(UNKNOWN_TWO, looks={**UNKNOWN_TWO["looks"],
                                              "futility_predictive": 0.1})
    cases = [
        ("count, one arm", COUNT, [("table kernel", kernel_rate(COUNT, "table"), 5_000_000),
                                   ("generic loop", kernel_rate(COUNT, "general"), 2_000_000),
                                   ("reference kernel", count_reference, 2_000_000)],
         count_vectorised, 2_000_000),
        ("normal known sd, two arms", KNOWN, [("general kernel", kernel_rate(KNOWN), 5_000_000)],
         known_vectorised, 2_000_000),
        ("normal unknown sd, one arm", UNKNOWN,
         [("general kernel", kernel_rate(UNKNOWN), 3_000_000)], unknown_vectorised, 1_000_000),
        ("  ... with predictive futility", unknown_pp,
         [("general kernel", kernel_rate(unknown_pp), 300_000)], None, 0),
        ("normal unknown sd, two arms", UNKNOWN_TWO,
         [("general kernel", kernel_rate(UNKNOWN_TWO), 100_000)], unknown_two_vectorised,
         40_000),
        ("  ... with predictive futility", unknown_two_pp,
         [("general kernel", kernel_rate(unknown_two_pp), 20_000)], None, 0),
    ]
    print(f"\n{'endpoint':32s} {'implementation':22s} {'studies/s':>12s} {'vs numpy':>9s} "
          f"{'P(success)':>11s} {'exact':>8s}")
    for label, data, kernels, reference, reference_studies in cases:
        for _, run, _studies in kernels:
            run(2000, 0)  # compile / load the kernel
        exact = ""
        try:
            exact = f"{compute(design(data), 'exact').oc['prob_success'].iloc[0]:.4f}"
        except InputError:  # no exact engine for an unknown sd
            pass
        base = None
        if reference is not None:
            base, value = rate(reference, reference_studies, repeat=2)
            print(f"{label:32s} {'vectorised numpy/scipy':22s} {base:12,.0f} {1.0:9.1f} "
                  f"{value:11.4f} {exact:>8s}")
        for name, run, studies in kernels:
            speed, value = rate(run, studies, repeat=2)
            ratio = f"{speed / base:9.1f}" if base else f"{'':9s}"
            print(f"{label if base is None else '':32s} {'octrial ' + name:22s} {speed:12,.0f} "
                  f"{ratio} {value:11.4f} {exact:>8s}")


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--memory", action="store_true", help="also run the 200 x 10^6 grid")
    parser.add_argument("--grid-child", action="store_true", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.grid_child:
        print(json.dumps(grid_memory()))
        return

    table_kernel(10_000, 0)
    generic_loop(1_000, 0)
    reference_kernel(1_000, 0)
    engine(10_000, 0)  # compile / load every kernel first
    rows = {
        "(a) naive loop, scipy.stats": rate(naive, 3_000, repeat=1),
        "(b) vectorised numpy/scipy": rate(vectorised, 2_000_000),
        "binomial draws alone (numpy)": rate(binomial_draws, 5_000_000),
        "octrial table kernel": rate(table_kernel, 20_000_000),
        "octrial engine, end to end": rate(engine, 20_000_000),
        "octrial generic study loop": rate(generic_loop, 2_000_000, repeat=2),
        "former general kernel (reference)": rate(reference_kernel, 500_000, repeat=1),
    }
    kernel = rows["octrial table kernel"][0]
    print(f"{'implementation':34s} {'studies/s':>14s} {'kernel is x faster':>18s} "
          f"{'P(success)':>11s}")
    for label, (speed, value) in rows.items():
        value_text = "" if label.startswith("binomial") else f"{value:.4f}"
        print(f"{label:34s} {speed:14,.0f} {kernel / speed:18.1f} {value_text:>11s}")
    print(f"\nexact P(success): {compute(design()).oc['prob_success'].iloc[0]:.4f}")
    endpoint_rows()

    if args.memory:
        out = subprocess.run([sys.executable, __file__, "--grid-child"], check=True,
                             capture_output=True, text=True).stdout
        m = json.loads(out)
        words_gb = m["scenarios"] * m["replicates"] * len(LOOKS) * 8 / 1e9
        print(f"\ngrid of {m['scenarios']} scenarios x {m['replicates']:,} replicates: "
              f"{m['seconds']:.1f} s on one core; peak RSS {m['rss_peak_mb']:.0f} MB "
              f"({m['rss_before_mb']:.0f} MB before the grid); unbatched random words "
              f"alone would need {words_gb:.1f} GB")


if __name__ == "__main__":
    main()
