"""Benchmark: simulated four-arm binary studies per second, per core (issue 16).

Run:  PYTHONPATH=. python tests/benchmarks/bench_multiarm.py      (about a minute)
      PYTHONPATH=. python tests/benchmarks/bench_multiarm.py families
      (normal with known and unknown sd and time-to-event endpoints: the several-arm
      loop of octrial.multiarm.family_loop end to end, with and without
      drop_if_best_below = 0.1, against a naive per-study Python loop)

Design: a shared control and three treatment arms, Beta(1, 1) priors, looks at 60, 120
and 180 subjects (15 per arm per look), each arm against the control on
Pr(p_arm - p_control > 0 | data) with efficacy 0.999 / 0.999 / 0.975 and futility 0.05
at the interim looks; fixed allocation, no Pr(best) rule; true rates 0.2 (control),
0.25, 0.35, 0.4. Compared in one run, on one core, all with the same decision tables
(each arm's two-arm lattice tables), so only the study loop differs:

* (a) naive: a Python loop over studies, looks and arms with numpy's binomial draws;
* (b) vectorised: numpy binomial draws for every study at once and the decisions by
  fancy indexing of the tables, arm by arm, with masks for arms that have left;
* octrial's kernel (random words + kernel, the engine's batch of 50 000), and the
  engine end to end (tables, seeding, summaries) for one scenario.

Target (issue 16): >= 1 million studies per second per core for the kernel. Each
estimate of P(at least one arm succeeds) is printed so they can be compared.
The same design with ``drop_if_best_below = 0.05`` (Pr(best) per study and interim
look, :mod:`octrial.numerics.beta_best`) is timed too. Rates are per CPU second of this
process (one core), whatever else the shared machine runs.
"""

from __future__ import annotations

import time

import numpy as np
from scipy import stats

from octrial.design.model import Source
from octrial.engines.monte_carlo import batch_generator
from octrial.multiarm import parse_multiarm
from octrial.multiarm.engine import simulate_design
from octrial.multiarm.fixed_scenario import best_memo
from octrial.multiarm.kernel import simulate
from octrial.multiarm.tables import EFFICACY, FUTILITY, build_tables
from octrial.simulation.draws import DrawTables

TRUTH = (0.2, 0.25, 0.35, 0.4)


def design(drop: float | None = None):
    flat = {"distribution": "beta", "a": 1, "b": 1}
    looks = {"n": [60, 120, 180], "efficacy": [0.999, 0.999, 0.975],
             "futility": [0.05, 0.05, "none"]}
    if drop is not None:
        looks["drop_if_best_below"] = drop
    data = {"schema": 1, "name": "bench", "endpoint": {"type": "binary", "better": "higher"},
            "hypothesis": {"comparison": "difference", "margin": 0.0},
            "arms": {a: {"prior": dict(flat)} for a in ("control", "t1", "t2", "t3")},
            "looks": looks,
            "scenarios": {a: [v] for a, v in zip(("control", "t1", "t2", "t3"), TRUTH,
                                                   strict=True)},
            "simulation": {"seed": 1, "replicates": 10_000}}
    return parse_multiarm(data, Source("bench", "", ""))


def naive(tables, reps, rng):
    inc = tables.increments
    wins = 0
    for _ in range(reps):
        x = np.zeros(4, dtype=np.int64)
        active = [True, True, True]
        won = False
        for k in range(3):
            x[0] += rng.binomial(inc[k, 0], TRUTH[0])
            for t in range(3):
                if active[t]:
                    x[1 + t] += rng.binomial(inc[k, 1 + t], TRUTH[1 + t])
                    code = tables.decision[t, k, x[1 + t], x[0]]
                    if code == EFFICACY:
                        won = True
                        active[t] = False
                    elif code == FUTILITY:
                        active[t] = False
            if not any(active):
                break
        wins += won
    return wins / reps


def vectorised(tables, reps, rng):
    inc = tables.increments
    draws = rng.binomial(inc[None, :, :], np.array(TRUTH)[None, None, :],
                         size=(reps, 3, 4)).cumsum(axis=1)
    active = np.ones((reps, 3), dtype=bool)
    won = np.zeros(reps, dtype=bool)
    for k in range(3):
        for t in range(3):
            code = tables.decision[t, k, draws[:, k, 1 + t], draws[:, k, 0]]
            won |= active[:, t] & (code == EFFICACY)
            active[:, t] &= code == 0
    return won.mean()


def kernel_run(d, tables, reps):
    order = np.array([1, 2, 3, 0])
    truth = np.array(TRUTH)[order]
    inc = np.ascontiguousarray(tables.increments[:, order])
    sizes = np.ascontiguousarray(tables.sizes[:, order])
    draws = DrawTables.from_pmfs([stats.binom.pmf(np.arange(m + 1), m, p)
                                  for k in range(3) for m, p in zip(inc[k], truth,
                                                                    strict=True)])
    T, K = 3, 3
    outs = (np.zeros(T, np.int64), np.zeros((T, K), np.int64), np.zeros((T, K), np.int64),
            np.zeros((T, K), np.int64), np.zeros(4, np.int64), np.zeros(7),
            np.zeros((2, K), np.int64), np.zeros((K, 4)), np.zeros(K, np.int64),
            np.zeros((K, 4), np.int64), np.empty((0, 0, 0)), np.empty((0, T)),
            *best_memo(tables))
    nulls = np.zeros(T, np.bool_)
    best = np.array([False, False, True])
    batch = 50_000
    start = time.process_time()
    for b in range(reps // batch):
        words = batch_generator(1, 0, b).bit_generator.random_raw(batch * 12).reshape(
            batch, 3, 4)
        simulate(words, truth, inc, sizes, tables.decision, tables.mean, tables.density,
                 tables.worse, tables.support, tables.reach, tables.weights,
                 tables.drop_below, tables.keep, tables.control, 1, nulls, best, *outs,
                 *draws.arrays())
    return time.process_time() - start, outs[5][2] / reps


def main() -> None:
    d = design()
    tables = build_tables(d)
    kernel_run(d, tables, 50_000)  # compile
    rng = np.random.default_rng(2)
    reps_naive, reps_vec, reps_kernel = 20_000, 1_000_000, 2_000_000

    t0 = time.process_time()
    p_naive = naive(tables, reps_naive, rng)
    t_naive = time.process_time() - t0
    t0 = time.process_time()
    p_vec = vectorised(tables, reps_vec, rng)
    t_vec = time.process_time() - t0
    t_kernel, p_kernel = kernel_run(d, tables, reps_kernel)
    t0 = time.process_time()
    simulate_design(d, replicates=reps_kernel)
    t_engine = time.process_time() - t0

    rate = {"naive": reps_naive / t_naive, "vectorised": reps_vec / t_vec,
            "kernel": reps_kernel / t_kernel, "engine": reps_kernel / t_engine}
    print(f"{'reference':<12}{'studies/s':>14}{'x naive':>10}{'P(any success)':>16}")
    for name, p in (("naive", p_naive), ("vectorised", p_vec), ("kernel", p_kernel),
                    ("engine", float("nan"))):
        print(f"{name:<12}{rate[name]:>14,.0f}{rate[name] / rate['naive']:>10.1f}"
              f"{p:>16.4f}")
    print(f"kernel vs vectorised: {rate['kernel'] / rate['vectorised']:.1f}x; "
          f"target 1,000,000 studies/s: {'met' if rate['kernel'] >= 1e6 else 'NOT met'}")
    db = design(0.05)
    tb = build_tables(db)
    kernel_run(db, tb, 50_000)
    t, _ = kernel_run(db, tb, 200_000)
    print(f"kernel with drop_if_best_below = 0.05: {200_000 / t:,.0f} studies/s")


# -- normal and time-to-event endpoints (octrial.multiarm.family_loop) ----------------
def family_design(kind: str, drop: float | None = None):
    """Control and three treatment arms, 60 / 120 / 180 subjects, efficacy 0.999 / 0.999
    / 0.975, futility 0.05: normal with known sd 1 (prior N(0, 10^2) on each difference),
    unknown sd (vague normal-inverse-gamma priors), or time-to-event (gamma priors)."""
    arms = ("control", "low", "mid", "high")
    if kind == "time-to-event":
        prior = {"distribution": "gamma", "shape": 0.1, "rate": 2.0}
        endpoint = {"type": "time-to-event", "better": "lower"}
        hypothesis = {"comparison": "ratio", "margin": 0.0}
        own = {"prior": prior}
        truth = [0.05, 0.045, 0.04, 0.035]
    else:
        known = kind == "normal, known sd"
        endpoint = ({"type": "normal", "sd": 1.0, "better": "higher"} if known else
                    {"type": "normal", "sd": "unknown", "true_sd": 1.0, "better": "higher"})
        hypothesis = {"comparison": "difference", "kind": "superiority", "margin": 0.0}
        if known:
            hypothesis["prior"] = {"distribution": "normal", "mean": 0.0, "sd": 10.0}
        own = {} if known else {"prior": {"distribution": "normal-inverse-gamma",
                                          "mean": 0.0, "mean_n": 0.01, "shape": 0.01,
                                          "scale": 0.01}}
        truth = [0.0, 0.1, 0.2, 0.3]
    looks: dict = {"n": [60, 120, 180], "efficacy": [0.999, 0.999, 0.975],
                   "futility": [0.05, 0.05, "none"]}
    if drop is not None:
        looks["drop_if_best_below"] = [drop, drop, "none"]
    data = {"schema": 1, "name": "bench", "title": "bench", "endpoint": endpoint,
            "hypothesis": hypothesis, "arms": {a: dict(own) for a in arms},
            "looks": looks, "scenarios": {a: [v] for a, v in zip(arms, truth, strict=True)},
            "simulation": {"seed": 1, "replicates": 1000}}
    return parse_multiarm(data, Source("bench.toml", "", ""))


def family_naive(d, reps: int, rng: np.random.Generator) -> float:
    """A Python loop over studies, looks and arms, one study at a time: the family's
    draw and benefit (unknown sd: each subject drawn, the posteriors of
    :mod:`octrial.endpoints.unknown_sd`); no Pr(best) rule."""
    from octrial.endpoints import unknown_sd
    from octrial.rules.stop import EFFICACY, FUTILITY, Rule

    family, T = d.family, len(d.treatments)
    unknown = getattr(family, "name", "") == "normal" and not d.endpoint.known_sd
    truth = np.array(d.scenarios.values[0], dtype=float)
    per = np.array(d.looks.per_arm)
    inc = np.diff(per, axis=0, prepend=0)
    rule = Rule.of(d.pairs[0].looks)
    wins = 0
    for _ in range(reps):
        stat = np.zeros(T + 1)
        squares = np.zeros(T + 1)
        live = list(range(T))
        won = False
        for k in range(d.looks.count):
            for a in range(T + 1):
                if unknown:
                    y = rng.normal(truth[a], 1.0, int(inc[k, a]))
                    stat[a] += y.sum()
                    squares[a] += (y * y).sum()
                else:
                    stat[a] += family.draw_statistics(d.pairs[0], 0 if a else 1, truth[a],
                                                      int(inc[k, a]), rng, 1)[0]
            for t in list(live):
                pair = d.pairs[t]
                n = (int(per[k, t + 1]), int(per[k, 0]))
                if unknown:
                    posts = []
                    for a, m in ((t + 1, n[0]), (0, n[1])):
                        p = pair.arms[0].prior
                        ybar = stat[a] / m
                        sd = np.sqrt((squares[a] - m * ybar * ybar) / (m - 1))
                        posts.append(unknown_sd.update(p.mean, p.mean_n, p.shape, p.scale,
                                                       n=m, ybar=ybar, sd=sd))
                    b = unknown_sd.benefit_two_arms(posts[0], posts[1], 0.0)
                else:
                    b = float(family.benefit_at(pair, (stat[t + 1:t + 2], stat[:1]), n)[0])
                code = rule.decide(k, b)
                if code == EFFICACY:
                    won = True
                if code in (EFFICACY, FUTILITY):
                    live.remove(t)
            if not live:
                break
        wins += won
    return wins / reps


def families() -> None:
    """Studies per CPU second of the several-arm loop for normal and time-to-event
    endpoints, end to end (simulate_design), against the naive loop."""
    print(f"{'family':<20}{'drop':>6}{'studies/s':>12}{'x naive':>9}{'P(any)':>8}")
    for kind in ("normal, known sd", "normal, unknown sd", "time-to-event"):
        d = family_design(kind)
        reps_naive = 2_000
        t0 = time.process_time()
        p_naive = family_naive(d, reps_naive, np.random.default_rng(3))
        naive_rate = reps_naive / (time.process_time() - t0)
        print(f"{kind:<20}{'naive':>6}{naive_rate:>12,.0f}{1.0:>9.1f}{p_naive:>8.3f}")
        for drop in (None, 0.1):
            dd = family_design(kind, drop)
            reps = 50_000 if drop is None else 20_000
            simulate_design(dd, replicates=1_000)  # imports and caches
            t0 = time.process_time()
            oc = simulate_design(dd, replicates=reps).iloc[0]
            rate = reps / (time.process_time() - t0)
            print(f"{kind:<20}{'-' if drop is None else drop:>6}{rate:>12,.0f}"
                  f"{rate / naive_rate:>9.1f}{oc['prob_success']:>8.3f}")


if __name__ == "__main__":
    import sys

    if sys.argv[1:] == ["families"]:
        families()
    else:
        main()
