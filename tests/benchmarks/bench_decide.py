"""Benchmark: interim decisions for count and normal endpoints against naive references.

Run:  python tests/benchmarks/bench_decide.py      (without an install: PYTHONPATH=.)

Cases:
* count demo (designs/single-arm-event-rate.toml): the decision at every lattice point of
  every look through the path ``octrial decide`` takes (tables cached per look and size),
  against rebuilding the reduced design's rule for every point (no cache).
* normal demo (designs/two-arm-continuous-score.toml): the decision at and either side of
  every bound, cached against rebuilt.
* unknown sd, two arms: B by the sinh-substituted trapezoid against adaptive
  ``scipy.integrate.quad`` (largest difference printed), per call.
* unknown sd, one arm: the predictive probability of final success by the exact
  one-dimensional integral against brute-force simulation of 200,000 continuations
  (difference printed in standard errors).
* unknown sd, two arms: the simulated predictive probability (50,000 draws) per call.

Each reference must agree before its time counts.
"""

from __future__ import annotations

import math
import time
from pathlib import Path

import numpy as np
from scipy import integrate, stats

from octrial.design.load import load_design
from octrial.endpoints import unknown_sd as U
from octrial.interim import normal as interim_normal
from octrial.interim import parse_data, rule_at
from octrial.interim.rule import observed_look
from octrial.rules.lattice import build_rule
from octrial.rules.normal import build_normal_rule

DESIGNS = Path(__file__).resolve().parents[2] / "designs"


def timed(fn, repeat: int = 1) -> tuple[float, object]:
    start = time.perf_counter()
    for _ in range(repeat):
        out = fn()
    return (time.perf_counter() - start) / repeat, out


def count_points(design) -> list[tuple[int, str]]:
    rule = build_rule(design)
    e = design.endpoint.exposure
    return [(k + 1, f"treatment={x}/{look.n[0] * e:g}")
            for k, look in enumerate(rule.looks) for x in range(look.shape[0])]


def decisions(design, points, clear=None) -> list[str]:
    out = []
    for look, *data in points:
        if clear is not None:
            clear()
        out.append(rule_at(design, look, parse_data(design, data))[1].decision)
    return out


def bench_count() -> None:
    design = load_design(DESIGNS / "single-arm-event-rate.toml")
    points = count_points(design)
    observed_look.cache_clear()
    cached, fast = timed(lambda: decisions(design, points))
    naive, slow = timed(lambda: decisions(design, points[::10], observed_look.cache_clear))
    assert fast[::10] == slow
    per_naive = naive / len(points[::10])
    per_cached = cached / len(points)
    print(f"count demo, {len(points)} lattice points: {per_cached * 1e3:.3f} ms per decision "
          f"(tables cached) vs {per_naive * 1e3:.1f} ms rebuilding the rule each time: "
          f"{per_naive / per_cached:.0f}x")


def bench_normal() -> None:
    design = load_design(DESIGNS / "two-arm-continuous-score.toml")
    table = build_normal_rule(design).boundary_table(design)
    points = []
    for row in table.to_dict("records"):
        for bound in (row["efficacy_bound"], row["futility_bound"]):
            for value in (bound, bound * (1 - 1e-9), bound * (1 + 1e-9)):
                points.append((row["look"], f"treatment={value!r},12,{row['n_treatment']}",
                               f"control=0,12,{row['n_control']}"))
    interim_normal.observed_rule.cache_clear()
    cached, fast = timed(lambda: decisions(design, points), repeat=5)
    naive, slow = timed(lambda: decisions(design, points,
                                          interim_normal.observed_rule.cache_clear))
    assert fast == slow
    print(f"normal demo, {len(points)} points at and beside the bounds: "
          f"{cached / len(points) * 1e3:.2f} ms per decision (rule cached) vs "
          f"{naive / len(points) * 1e3:.2f} ms rebuilt: {naive / cached:.1f}x")


def bench_unknown_sd() -> None:
    t = U.update(0.0, 1.0, 2.0, 4.0, n=15, ybar=1.1, sd=2.1)
    c = U.update(0.0, 1.0, 0.5, 1.0, n=40, ybar=0.2, sd=1.7)
    ft, fc = t.distribution(), c.distribution()

    def by_quad(d: float) -> float:
        cuts = sorted((c.mean, t.mean - d))
        return sum(integrate.quad(lambda u: fc.pdf(u) * ft.sf(u + d), lo, hi, epsabs=1e-15,
                                  epsrel=1e-13, limit=400)[0]
                   for lo, hi in [(-np.inf, cuts[0]), (cuts[0], cuts[1]), (cuts[1], np.inf)])

    shifts = np.linspace(-1, 3, 9)
    quad_time, ref = timed(lambda: [by_quad(d) for d in shifts])
    ours_time, got = timed(lambda: [U.benefit_two_arms(t, c, d) for d in shifts], repeat=20)
    print(f"two-arm B (unknown sd): {ours_time / shifts.size * 1e6:.0f} us per call vs "
          f"{quad_time / shifts.size * 1e3:.1f} ms by scipy quad: "
          f"{quad_time / ours_time:.0f}x; largest difference "
          f"{max(abs(a - b) for a, b in zip(got, ref, strict=True)):.1e}")

    post = U.update(0.2, 2.0, 3.0, 4.0, n=20, ybar=0.6, sd=1.8)
    exact_time, exact = timed(lambda: U.predictive_one_arm(post, 25, 0.0, 0.975), repeat=5)

    def brute() -> float:
        rng = np.random.default_rng(1)
        r, m = 200_000, 25
        s2 = post.scale / rng.gamma(post.shape, 1.0, r)
        mu = rng.normal(post.mean, np.sqrt(s2 / post.mean_n))
        y = mu[:, None] + np.sqrt(s2)[:, None] * rng.standard_normal((r, m))
        ybar, ss = y.mean(axis=1), y.var(axis=1) * m
        k = post.mean_n + m
        m_n = (post.mean_n * post.mean + m * ybar) / k
        a_n = post.shape + m / 2
        b_n = post.scale + ss / 2 + post.mean_n * m * (ybar - post.mean) ** 2 / (2 * k)
        return float(np.mean(stats.t.sf(-m_n / np.sqrt(b_n / (a_n * k)), 2 * a_n) >= 0.975))

    brute_time, estimate = timed(brute)
    se = math.sqrt(estimate * (1 - estimate) / 200_000)
    print(f"one-arm PP (unknown sd): {exact_time * 1e3:.0f} ms exact integral vs "
          f"{brute_time * 1e3:.0f} ms for 200,000 simulated continuations (SE {se:.4f}): "
          f"{brute_time / exact_time:.0f}x; difference {(exact - estimate) / se:+.2f} SE")
    two_time, (pp, pp_se) = timed(lambda: U.predictive_two_arms(t, c, (25, 25), 0.0, 0.975,
                                                               seed=3))
    print(f"two-arm PP (unknown sd): {two_time:.2f} s for {U.PREDICTIVE_DRAWS:,} draws "
          f"(PP {pp:.4f}, SE {pp_se:.4f})")


if __name__ == "__main__":
    bench_count()
    bench_normal()
    bench_unknown_sd()
