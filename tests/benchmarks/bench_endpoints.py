"""Benchmark: exact normal and count operating characteristics against naive references.

Run:  python tests/benchmarks/bench_endpoints.py

Cases (issue targets in brackets):
* normal, known sd, two arms, 5 looks, 50 scenarios  [under a second]
  references: (a) the same recursive integration written plainly, one scenario at a time
  with scipy.stats calls and no reweighting between scenarios; (b) a hand-written Monte
  Carlo simulation of 20,000 studies per scenario (vectorised numpy).
* count, one arm, 3 looks, 100 scenarios  [under a second]
  reference: a per-outcome Python loop with scipy.stats.poisson and scipy.stats.gamma, as
  a hand-written script would do it (truncated at the same counts).
* count, two arms (rate ratio), 2 looks, 100 scenarios
  reference: the same loop over (treatment, control) counts, timed on 4 scenarios and
  reported per scenario.

Each reference must agree with octrial before its time counts; the script prints the
largest difference (Monte Carlo: in standard errors).
"""

from __future__ import annotations

import math
import time

import numpy as np
from scipy import stats

from octrial.design.load import parse_design
from octrial.design.model import Source
from octrial.engines.exact_normal import NormalRecursionEngine
from octrial.evaluation import compute

NORMAL = {
    "schema": 1, "name": "bench-normal",
    "endpoint": {"type": "normal", "sd": 12.0, "better": "higher"},
    "hypothesis": {"comparison": "difference", "margin": 0.0,
                   "prior": {"distribution": "normal", "mean": 0.0, "sd": 6.0}},
    "arms": {"treatment": {}, "control": {}},
    "looks": {"n": [100, 200, 300, 400, 500],
              "efficacy": {"function": "1 - lambda * t^eta", "lambda": 0.025, "eta": 3},
              "futility": 0.1},
    "scenarios": {"control": [40.0], "effect": {"from": -2.0, "to": 7.8, "step": 0.2}},
}
COUNT_ONE = {
    "schema": 1, "name": "bench-count",
    "endpoint": {"type": "count", "exposure": 1.0},
    "hypothesis": {"benchmark": 1.5},
    "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 1.5, "rate": 1.0}}},
    "looks": {"n": [50, 100, 150], "efficacy": [0.999, 0.995, 0.975], "futility": 0.05},
    "scenarios": {"treatment": {"from": 0.5, "to": 2.48, "step": 0.02}},
}
COUNT_TWO = {
    "schema": 1, "name": "bench-count-two",
    "endpoint": {"type": "count", "exposure": 0.5},
    "hypothesis": {"comparison": "ratio", "kind": "superiority", "margin": 0.0},
    "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 1, "rate": 1}},
             "control": {"prior": {"distribution": "gamma", "shape": 1, "rate": 1}}},
    "looks": {"n": [40, 80], "efficacy": [0.995, 0.975], "futility": 0.1},
    "scenarios": {"control": [0.8, 1.0, 1.2, 1.4, 1.6],
                  "ratio": {"from": 0.5, "to": 1.45, "step": 0.05}},
}


def design(data):
    return parse_design(data, Source("bench.toml", "", ""))


def timed(fn, *args, repeat: int = 1, **kwargs):
    best, value = np.inf, None
    for _ in range(repeat):
        start = time.perf_counter()
        value = fn(*args, **kwargs)
        best = min(best, time.perf_counter() - start)
    return best, value


# -- normal references ------------------------------------------------------------------
def plain_recursion(d, r: int = 32) -> np.ndarray:
    """Probability of success per scenario, one scenario at a time, scipy.stats calls."""
    rule = d.family.decision_rule(d)
    info = np.array([look.information for look in rule.looks])
    step = np.diff(info, prepend=0.0)
    out = []
    for t, c in d.scenarios.values:
        eta = t - c
        success = stats.norm.sf(rule.looks[0].upper, eta * info[0], math.sqrt(info[0]))
        nodes = weights = dens = None
        for k in range(len(info) - 1):
            look = rule.looks[k]
            a = max(look.lower, eta * info[k] - 8 * math.sqrt(info[k]))
            b = min(look.upper, eta * info[k] + 8 * math.sqrt(info[k]))
            h = min(math.sqrt(step[k]), math.sqrt(step[k + 1])) / r
            m = max(2, 2 * math.ceil((b - a) / (2 * h)))
            new = np.linspace(a, b, m + 1)
            w = np.full(m + 1, 2.0)
            w[1::2], w[0], w[-1] = 4.0, 1.0, 1.0
            w *= (b - a) / m / 3
            if k == 0:
                dens = stats.norm.pdf(new, eta * info[0], math.sqrt(info[0]))
            else:
                dens = np.array([np.sum(weights * dens * stats.norm.pdf(
                    s, nodes + eta * step[k], math.sqrt(step[k]))) for s in new])
            nodes, weights = new, w
            success += np.sum(weights * dens * stats.norm.sf(
                rule.looks[k + 1].upper, nodes + eta * step[k + 1], math.sqrt(step[k + 1])))
        out.append(success)
    return np.array(out)


def monte_carlo(d, replicates: int = 20_000, seed: int = 1) -> np.ndarray:
    """Probability of success per scenario by simulating studies (sample means)."""
    rule = d.family.decision_rule(d)
    rng = np.random.default_rng(seed)
    info = np.array([look.information for look in rule.looks])
    step = np.diff(info, prepend=0.0)
    out = []
    for t, c in d.scenarios.values:
        eta = t - c
        score = np.cumsum(rng.normal(eta * step, np.sqrt(step), size=(replicates, len(info))),
                          axis=1)
        alive = np.ones(replicates, dtype=bool)
        success = np.zeros(replicates, dtype=bool)
        for k, look in enumerate(rule.looks):
            eff = alive & (score[:, k] >= look.upper)
            success |= eff
            alive &= ~eff & (score[:, k] >= look.lower)
        out.append(success.mean())
    return np.array(out)


# -- count references -------------------------------------------------------------------
def naive_count_one_arm(d, sizes) -> np.ndarray:
    looks, eff, fut = d.looks.n, d.looks.efficacy, d.looks.futility
    a, b = 1.5, 1.0
    out = []
    for (rate,) in d.scenarios.values:
        dist = {0: 1.0}
        success, previous = 0.0, 0
        for k, n in enumerate(looks):
            m = n - previous
            new: dict[int, float] = {}
            for x, mass in dist.items():
                for y in range(sizes[k] - x):
                    new[x + y] = new.get(x + y, 0.0) + mass * stats.poisson.pmf(y, rate * m)
            dist = {}
            for x, mass in new.items():
                p = stats.gamma.cdf(1.5, a + x, scale=1 / (b + n))
                if eff[k] is not None and p >= eff[k] - 1e-12:
                    success += mass
                elif k < len(looks) - 1 and not (fut[k] is not None and p < fut[k] - 1e-12):
                    dist[x] = mass
            previous = n
        out.append(success)
    return np.array(out)


def naive_count_two_arm(d, sizes, scenarios) -> np.ndarray:
    """Pr(success) with Pr(rate_T < rate_C) from the Beta identity via scipy.stats.beta."""
    per_arm = [n // 2 for n in d.looks.n]
    eff, fut = d.looks.efficacy, d.looks.futility
    e = d.endpoint.exposure
    out = []
    for rate_t, rate_c in scenarios:
        dist = {(0, 0): 1.0}
        success, previous = 0.0, 0
        for k, n in enumerate(per_arm):
            m = n - previous
            pt = stats.poisson.pmf(np.arange(sizes[k]), rate_t * e * m)
            pc = stats.poisson.pmf(np.arange(sizes[k]), rate_c * e * m)
            new: dict[tuple[int, int], float] = {}
            for (x_t, x_c), mass in dist.items():
                for y_t in range(sizes[k] - x_t):
                    for y_c in range(sizes[k] - x_c):
                        key = (x_t + y_t, x_c + y_c)
                        new[key] = new.get(key, 0.0) + mass * pt[y_t] * pc[y_c]
            dist = {}
            for (x_t, x_c), mass in new.items():
                # equal arms: k = b'_T / b'_C = 1, so Pr(ratio < 1) = I_{1/2}(a'_T, a'_C)
                p = stats.beta.cdf(0.5, 1 + x_t, 1 + x_c)
                if p >= eff[k] - 1e-12:
                    success += mass
                elif k < len(per_arm) - 1 and not p < fut[k] - 1e-12:
                    dist[(x_t, x_c)] = mass
            previous = n
        out.append(success)
    return np.array(out)


def main() -> None:
    rows = []
    d = design(NORMAL)
    compute(d)  # warm-up
    t_full, ev = timed(compute, d, repeat=5)
    fast = ev.oc["prob_success"].to_numpy()
    # like for like: the plain recursion gives stopping probabilities only
    truths = np.asarray(d.scenarios.values, dtype=float)
    t_fast, _ = timed(NormalRecursionEngine.run, d, truths, repeat=5, estimate=False)
    t_plain, plain = timed(plain_recursion, d)
    rows.append(("normal, 2 arms, 5 looks, 50 scenarios", "plain recursion (scipy)", t_fast,
                 t_plain, f"{np.max(np.abs(plain - fast)):.1e}"))
    rows.append(("  (whole run: + bias, RMSE, coverage)", "plain recursion (scipy)", t_full,
                 t_plain, ""))
    t_mc, mc = timed(monte_carlo, d)
    se = np.maximum(np.sqrt(fast * (1 - fast) / 20_000), 1 / 20_000)
    rows.append(("", "Monte Carlo, 20000 studies each", t_fast, t_mc,
                 f"{np.max(np.abs(mc - fast) / se):.1f} se"))

    d = design(COUNT_ONE)
    compute(d)
    t_fast, ev = timed(compute, d, repeat=5)
    rule = d.family.decision_rule(d)
    sizes = [look.shape[0] for look in rule.looks]
    t_naive, naive = timed(naive_count_one_arm, d, sizes)
    rows.append(("count, 1 arm, 3 looks, 100 scenarios", "per-outcome loop (scipy)", t_fast,
                 t_naive, f"{np.max(np.abs(naive - ev.oc['prob_success'].to_numpy())):.1e}"))

    d = design(COUNT_TWO)
    compute(d)
    t_fast, ev = timed(compute, d, repeat=3)
    rule = d.family.decision_rule(d)
    sizes = [look.shape[0] for look in rule.looks]
    picks = [0, 33, 66, 99]
    t_naive, naive = timed(naive_count_two_arm, d, sizes, [d.scenarios.values[i] for i in picks])
    per = len(d.scenarios) / len(picks)
    rows.append((f"count, 2 arms (ratio), 2 looks, {len(d.scenarios)} scen.",
                 "per-outcome loop (scipy), 4 scen. x 25", t_fast, t_naive * per,
                 f"{np.max(np.abs(naive - ev.oc['prob_success'].to_numpy()[picks])):.1e}"))

    print(f"{'case':42s} {'reference':40s} {'octrial s':>10s} {'ref s':>9s} {'ratio':>8s} "
          f"{'agreement':>10s}")
    for case, ref, fast_s, ref_s, gap in rows:
        print(f"{case:42s} {ref:40s} {fast_s:10.4f} {ref_s:9.2f} {ref_s / fast_s:8.0f} "
              f"{gap:>10s}")


if __name__ == "__main__":
    main()
