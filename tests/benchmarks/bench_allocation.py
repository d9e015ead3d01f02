"""Benchmark: simulated four-arm binary studies with adaptive allocation, per second.

Run:  python tests/benchmarks/bench_allocation.py      (under a minute)

Design: control and three treatment arms, Beta(1, 1) priors, looks at 60, 120, 180
subjects in all, blocks split by complete randomisation; true rates 0.2, 0.25, 0.35,
0.45. Allocation: fixed equal, and information-weighted adaptive (Pr(best)^c with
c = n / (2N), equal control share, minimum 0.05, arms dropped when Pr(best) < 0.05).
Compared in one run, on one core (rates per CPU second of this process):

* (a) naive: a Python loop over studies and looks, numpy multinomial and binomial draws
  per study and Pr(best) by scipy quadrature (:func:`probability_best`) per look;
* (b) vectorised: numpy for all studies of a batch at once: multinomial draws with
  per-study probabilities and Pr(best) from the same node table as the kernel,
  gathered into (studies x arms x nodes) arrays;
* octrial's kernel (:func:`simulate_batch`, uniforms included); then with each arm's
  own efficacy / futility rule against the control at the sizes reached (as every
  several-arm design has: Pr(p_t > p_c) by the exact finite sum), against a naive loop
  that adds the same rule with ``scipy.integrate.quad``; and the several-arm engine end to
  end (:func:`octrial.multiarm.engine.simulate_design` on the same design written as a
  design file: seeding, tallies, the table).

Target (issue 16): >= 200,000 adaptive studies per second per core (>= 1,000,000 with
fixed allocation is the several-arm engine's target, measured in its own benchmark).
The expected subjects per arm from each method are printed so they can be compared.
"""

from __future__ import annotations

import time

import numpy as np
from scipy import integrate, stats

from octrial.allocation import AllocationRule, next_allocation, probability_best
from octrial.allocation.decisions import ArmRule, new_memo
from octrial.allocation.simulate import AdaptiveStudy, simulate_batch
from octrial.design.model import Source
from octrial.multiarm import parse_multiarm
from octrial.multiarm.engine import simulate_design

LOOKS = (60, 120, 180)
RATES = np.array([0.2, 0.25, 0.35, 0.45])
RULES = {"fixed": AllocationRule("fixed"),
         "adaptive": AllocationRule("information", minimum=0.05)}


def naive(study: AdaptiveStudy, studies: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    arms = RATES.size
    sizes = np.zeros((studies, arms))
    for r in range(studies):
        n, x = np.zeros(arms, int), np.zeros(arms, int)
        active = np.ones(arms, bool)
        probs = next_allocation(study.rule, np.zeros(arms), active, True, 0, LOOKS[-1])
        enrolled = 0
        for k, total in enumerate(LOOKS):
            m = rng.multinomial(total - enrolled, probs)
            n += m
            x += rng.binomial(m, RATES)
            enrolled = total
            if k == len(LOOKS) - 1:
                break
            best = np.zeros(arms)
            if study.rule.form != "fixed" or study.drop_below > 0:
                idx = np.flatnonzero(active[1:]) + 1
                best[idx] = probability_best(x[idx], n[idx], study.prior)
                active[1:] &= best[1:] >= study.drop_below
                idx = np.flatnonzero(active[1:]) + 1
                best[:] = 0
                best[idx] = probability_best(x[idx], n[idx], study.prior)
            probs = next_allocation(study.rule, best, active, True, enrolled, LOOKS[-1])
        sizes[r] = n
    return sizes


def vectorised(study: AdaptiveStudy, studies: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    arms = RATES.size
    table = study.tables(arms)
    n = np.zeros((studies, arms), int)
    x = np.zeros((studies, arms), int)
    active = np.ones((studies, arms), bool)
    probs = np.full((studies, arms), 1 / arms)
    enrolled = 0
    for k, total in enumerate(LOOKS):
        m = rng.multinomial(total - enrolled, probs)
        n += m
        x += rng.binomial(m, RATES)
        enrolled = total
        if k == len(LOOKS) - 1 or study.rule.form == "fixed":
            continue
        state = n * (n + 1) // 2 + x
        best = np.zeros((studies, arms))
        for _ in range(2):   # before and after dropping
            worse = np.where(active[:, 1:, None], table.worse[state[:, 1:]], 1.0)
            prod_all = np.prod(worse, axis=1, keepdims=True)
            others = prod_all / np.where(worse > 0, worse, 1.0)
            dens = table.density[state[:, 1:]] * table.weights
            best[:, 1:] = np.where(active[:, 1:], np.sum(dens * others, axis=2), 0.0)
            active[:, 1:] &= best[:, 1:] >= study.drop_below
        c = enrolled / (2 * LOOKS[-1])
        treated = active[:, 1:].sum(axis=1, keepdims=True)
        control = 1 / (treated + 1)
        w = np.where(active[:, 1:], best[:, 1:] ** c, 0.0)
        share = w / w.sum(axis=1, keepdims=True)
        floor = study.rule.minimum / (1 - control)
        # the minimum: one pass of holding (enough for this design's three arms in
        # nearly every study; the kernel iterates to the end)
        held = active[:, 1:] & (share < floor)
        free = np.where(held, 0.0, w)
        share = np.where(held, floor, free / free.sum(axis=1, keepdims=True)
                         * (1 - held.sum(axis=1, keepdims=True) * floor))
        probs = np.concatenate([control, share * (1 - control)], axis=1)
    return n


def rate(fn, *args) -> tuple[float, object]:
    # CPU time of this process: studies per second of one core, whatever else the
    # shared machine runs (wall-clock rates are lower under load)
    start = time.process_time()
    out = fn(*args)
    return time.process_time() - start, out


def main() -> None:
    for name, rule in RULES.items():
        study = AdaptiveStudy(LOOKS, rule, drop_below=0.05 if name == "adaptive" else 0.0)
        table = study.tables(RATES.size)
        simulate_batch(study, RATES, 10, 1, 0, 0, table)       # compile
        counts = {"naive": 300, "vectorised": 50_000, "octrial": 200_000}
        t_naive, s_naive = rate(naive, study, counts["naive"], 1)
        t_vec, s_vec = rate(vectorised, study, counts["vectorised"], 2)
        t_oct = 0.0
        sizes = []
        for b in range(counts["octrial"] // 50_000):
            t, batch = rate(simulate_batch, study, RATES, 50_000, 3, 0, b, table)
            t_oct += t
            sizes.append(batch.sizes[:, -1, :])
        speeds = {"naive": counts["naive"] / t_naive,
                  "vectorised": counts["vectorised"] / t_vec,
                  "octrial": counts["octrial"] / t_oct}
        print(f"\n{name} allocation, 4 arms, looks {LOOKS}")
        for key, value in speeds.items():
            print(f"  {key:10s} {value:12,.0f} studies/s   x{speeds['octrial'] / value:8.1f}")
        print("  expected n per arm: naive", s_naive.mean(axis=0).round(1),
              " vectorised", s_vec.mean(axis=0).round(1),
              " octrial", np.concatenate(sizes).mean(axis=0).round(1))
    # each arm's own rule against the control at the sizes reached
    decided = AdaptiveStudy(LOOKS, RULES["adaptive"], drop_below=0.05,
                            arm_rule=ArmRule(EFFICACY, FUTILITY))
    table, memo = decided.tables(RATES.size), new_memo()
    simulate_batch(decided, RATES, 10, 1, 0, 0, table, memo)
    t_oct = 0.0
    any_success = []
    for b in range(4):
        t, batch = rate(simulate_batch, decided, RATES, 50_000, 3, 0, b, table, memo)
        t_oct += t
        any_success.append((batch.outcome == 1).any(axis=1))
    t_naive, won = rate(naive_decided, decided, 100, 4)
    speeds = {"naive": 100 / t_naive, "octrial": 200_000 / t_oct}
    print(f"\nadaptive allocation with each arm's own rule, looks {LOOKS}")
    for key, value in speeds.items():
        print(f"  {key:10s} {value:12,.0f} studies/s   x{speeds['octrial'] / value:8.1f}")
    print(f"  P(any arm succeeds): naive {won:.2f} (100 studies), octrial "
          f"{np.concatenate(any_success).mean():.4f}")
    simulate_design(engine_design(), replicates=10)
    t, _ = rate(simulate_design, engine_design(), 200_000)
    print(f"  several-arm engine end to end (simulate_design): {200_000 / t:12,.0f} studies/s")


EFFICACY = (0.999, 0.99, 0.975)
FUTILITY = (0.05, 0.1, np.nan)


def naive_decided(study: AdaptiveStudy, studies: int, seed: int) -> float:
    """The naive loop with each arm's rule: Pr(p_t > p_c) by scipy quadrature."""
    rng = np.random.default_rng(seed)
    arms = RATES.size
    wins = 0
    for _ in range(studies):
        n, x = np.zeros(arms, int), np.zeros(arms, int)
        active = np.ones(arms, bool)
        probs = next_allocation(study.rule, np.zeros(arms), active, True, 0, LOOKS[-1])
        enrolled = 0
        won = False
        for k, total in enumerate(LOOKS):
            m = rng.multinomial(total - enrolled, probs)
            n += m
            x += rng.binomial(m, RATES)
            enrolled = total
            for j in np.flatnonzero(active[1:]) + 1:
                f = stats.beta(1 + x[j], 1 + n[j] - x[j]).pdf
                g = stats.beta(1 + x[0], 1 + n[0] - x[0]).cdf
                b = integrate.quad(lambda p, f=f, g=g: f(p) * g(p), 0, 1)[0]
                if b >= EFFICACY[k]:
                    won = True
                    active[j] = False
                elif k == len(LOOKS) - 1 or b < FUTILITY[k]:
                    active[j] = False
            if k == len(LOOKS) - 1 or not active[1:].any():
                break
            best = np.zeros(arms)
            idx = np.flatnonzero(active[1:]) + 1
            best[idx] = probability_best(x[idx], n[idx], study.prior)
            active[1:] &= best[1:] >= study.drop_below
            idx = np.flatnonzero(active[1:]) + 1
            if idx.size == 0:
                break
            best[:] = 0
            best[idx] = probability_best(x[idx], n[idx], study.prior)
            probs = next_allocation(study.rule, best, active, True, enrolled, LOOKS[-1])
        wins += won
    return wins / studies


def engine_design():
    """The decided study as a several-arm design file (information form, minimum 0.05,
    dropping below Pr(best) 0.05)."""
    flat = {"distribution": "beta", "a": 1, "b": 1}
    names = ("control", "t1", "t2", "t3")
    data = {"schema": 1, "name": "bench", "endpoint": {"type": "binary", "better": "higher"},
            "hypothesis": {"comparison": "difference", "margin": 0.0},
            "arms": {a: {"prior": dict(flat)} for a in names},
            "looks": {"n": list(LOOKS), "efficacy": list(EFFICACY),
                      "futility": [0.05, 0.1, "none"], "drop_if_best_below": 0.05},
            "allocation": {"kind": "information", "minimum": 0.05},
            "scenarios": {a: [float(v)] for a, v in zip(names, RATES, strict=True)},
            "simulation": {"seed": 1, "replicates": 10_000}}
    return parse_multiarm(data, Source("bench", "", ""))


if __name__ == "__main__":
    main()
