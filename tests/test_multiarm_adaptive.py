"""Several arms with response-adaptive allocation through the one several-arm engine
(octrial.multiarm.engine.simulate_design), against checks from outside the project:

* the adaptive study loop run with fixed allocation, rounded blocks and each arm's
  planned subjects against the fixed-allocation engine (decision tables at planned
  sizes, a different random stream), within 4 standard errors per column;
* selection, dropping, Pr(select best) and the selected arm's bias study by study
  against a plain numpy/scipy loop (scipy quadrature for every posterior probability);
* one worker against two joblib workers: identical tables (seeds per scenario and
  batch);
* what adaptive allocation does not support is refused naming the design-file key.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from scipy import integrate, stats

from octrial.allocation.simulate import simulate_batch
from octrial.design.model import Source
from octrial.errors import SettingsError
from octrial.execution import Execution
from octrial.multiarm import Allocation, parse_multiarm
from octrial.multiarm.adaptive import adaptive_study
from octrial.multiarm.engine import simulate_design


def flat():
    return {"distribution": "beta", "a": 1, "b": 1}


def design_data(n=(60, 120, 180), allocation=None, **looks):
    arms = ("low", "mid", "high")
    data = {
        "schema": 1, "name": "multi", "title": "several arms, adaptive (test)",
        "endpoint": {"type": "binary", "better": "higher"},
        "hypothesis": {"comparison": "difference", "kind": "superiority", "margin": 0.0},
        "arms": {"control": {"prior": flat()}} | {a: {"prior": flat()} for a in arms},
        "looks": {"n": list(n), "efficacy": [0.999] * (len(n) - 1) + [0.975],
                  "futility": [0.05] * (len(n) - 1) + ["none"]} | looks,
        "scenarios": {"control": [0.2, 0.2], "low": [0.2, 0.2], "mid": [0.2, 0.3],
                      "high": [0.2, 0.4]},
        "simulation": {"seed": 7, "replicates": 20_000},
    }
    if allocation is not None:
        data["allocation"] = allocation
    return data


def parse(data):
    return parse_multiarm(data, Source("test.toml", "", ""))


def _bound_se(column: str, row, replicates: int, design) -> float:
    """A standard error (or an upper bound on it) of one column's estimate."""
    value = float(row[column])
    if column == "selected_bias":
        # |estimate - truth| < 1: sd <= 1/2 (bound), over the studies with a selection
        return 0.5 / np.sqrt(max(row["prob_success"] * replicates, 1.0))
    if column == "sd_n":
        # sample sd: SE about sd / sqrt(2R) for a normal variable; a factor 2 for the
        # heavier tails of a study size (common practice, no source)
        return 2 * value / np.sqrt(2 * replicates)
    if column == "expected_n":
        return float(row["sd_n"]) / np.sqrt(replicates)
    if column.endswith("_n"):
        # an arm's subjects lie in [0, its planned maximum]: sd <= half the range
        return design.looks.n[-1] / 2 / np.sqrt(replicates)
    if column.endswith("_share"):
        return 0.5 / np.sqrt(replicates * 0.05)
    return np.sqrt(max(value * (1 - value), 0.0) / replicates)


def test_adaptive_loop_with_fixed_rounded_allocation_matches_the_fixed_engine():
    # the same design (dropping on Pr(best), at most two arms kept) through both study
    # loops: the adaptive loop with kind 'fixed', rounded blocks and each arm's planned
    # subjects has the fixed engine's conduct, so every column agrees within 4 SE
    # (combined over the two runs; SEs of means bounded as in _bound_se). The two
    # engines share no random numbers and decide by different computations (decision
    # tables at planned sizes; quadrature at the sizes reached)
    data = design_data(drop_if_best_below=0.15)
    data["selection"] = {"keep": 2}
    fixed = parse(data)
    reps = 20_000
    a = simulate_design(fixed, replicates=reps)
    rounded = dataclasses.replace(fixed, allocation=Allocation("fixed", assignment="rounded"))
    b = simulate_design(rounded, replicates=reps, planned_blocks=True)
    assert list(a.columns) == list(b.columns)
    numeric = [c for c in a.columns if c not in ("scenario", "method", "replicates")
               and not c.startswith("true_") and not c.endswith("is_null")
               and not c.endswith("_se")]
    checked = 0
    for i in range(len(a)):
        for c in numeric:
            se = np.hypot(_bound_se(c, a.iloc[i], reps, fixed),
                          _bound_se(c, b.iloc[i], reps, fixed))
            assert abs(a.iloc[i][c] - b.iloc[i][c]) <= 4 * se + 1e-12, (i, c, a.iloc[i][c],
                                                                       b.iloc[i][c])
            checked += 1
    assert checked > 100
    # the rounded planned blocks are the planned sizes: shares and sizes at look 1 exact
    assert b.iloc[1]["low_look1_n"] == a.iloc[1]["low_look1_n"] == 15
    assert b.iloc[1]["control_block1_share"] == pytest.approx(0.25, abs=1e-15)
    assert a.iloc[1]["high_look1_drop"] < a.iloc[1]["low_look1_drop"]


def _benefit(x_t, n_t, x_c, n_c):
    # Pr(p_t > p_c | data), flat priors: integral of f_t(p) F_c(p) dp (scipy quad)
    f = stats.beta(1 + x_t, 1 + n_t - x_t).pdf
    g = stats.beta(1 + x_c, 1 + n_c - x_c).cdf
    return integrate.quad(lambda p: f(p) * g(p), 0, 1, epsabs=1e-12, limit=200)[0]


def _best(x, n, live):
    # Pr(arm j best among the live arms), flat priors (scipy quad of f_j prod F_i)
    out = {}
    for j in live:
        f = stats.beta(1 + x[j], 1 + n[j] - x[j]).pdf
        others = [stats.beta(1 + x[i], 1 + n[i] - x[i]).cdf for i in live if i != j]
        out[j] = integrate.quad(lambda p, f=f, o=others: f(p) * np.prod([c(p) for c in o]),
                                0, 1, epsabs=1e-12, limit=200)[0]
    return out


def test_selection_and_select_best_study_by_study_against_a_scipy_loop():
    # information-weighted allocation, dropping below Pr(best) 0.2 and at most two arms
    # kept after each interim look. The arms' sizes and responses per look are the
    # study loop's (the allocation sequence has its own check in test_allocation.py);
    # everything decided from them is redone here in plain Python with scipy: each
    # arm's rule, Pr(best), dropping, selection of the arms that go on, the selected arm
    # (successful, highest posterior mean at its decision) and its error. The engine's
    # table must count exactly the same studies (decisions could differ only within
    # about 1e-9 of a threshold).
    data = design_data(drop_if_best_below=0.2,
                       allocation={"kind": "information", "minimum": 0.05})
    data["selection"] = {"keep": 2}
    d = parse(data)
    reps, scenario = 120, 1
    oc = simulate_design(d, replicates=reps).iloc[scenario]
    rates = np.array(d.scenarios.values[scenario])
    batch = simulate_batch(adaptive_study(d), rates, reps, 7, scenario, 0)
    eff, fut = d.pairs[0].looks.efficacy, d.pairs[0].looks.futility
    K, T = 3, 3
    success = np.zeros(T, int)
    dropped = np.zeros((T, K), int)
    select_best = 0
    error = 0.0
    selected = 0
    any_null = 0
    for r in range(reps):
        live = [1, 2, 3]
        won = {}
        for k in range(K):
            n, x = batch.sizes[r, k], batch.responses[r, k]
            for t in list(live):
                b = _benefit(x[t], n[t], x[0], n[0])
                if b >= eff[k]:
                    won[t] = (1 + x[t]) / (2 + n[t])     # posterior mean, Beta(1, 1) prior
                    live.remove(t)
                elif k == K - 1 or (fut[k] is not None and b < fut[k]):
                    live.remove(t)
            if live and k < K - 1:
                probs = _best(x, n, live)
                for t in list(live):
                    if probs[t] < 0.2:
                        live.remove(t)
                        dropped[t - 1, k] += 1
                while len(live) > 2:
                    worst = min(live, key=lambda t: (probs[t], -t))
                    live.remove(worst)
                    dropped[worst - 1, k] += 1
            if not live:
                break
        for t in won:
            success[t - 1] += 1
        if won:
            chosen = max(won, key=lambda t: (won[t], -t))
            selected += 1
            select_best += rates[chosen] == rates[1:].max()
            error += won[chosen] - rates[chosen]
            any_null += any(rates[t] <= rates[0] for t in won)
    for t, name in enumerate(d.treatment_names):
        assert round(oc[f"{name}_prob_success"] * reps) == success[t], name
        for k in range(K):
            assert round(oc[f"{name}_look{k + 1}_drop"] * reps) == dropped[t, k], (name, k)
    assert round(oc["prob_select_best"] * reps) == select_best
    assert round(oc["fwer"] * reps) == any_null
    assert oc["selected_bias"] == pytest.approx(error / selected, abs=1e-12)
    assert dropped.sum() > 0 and select_best > 0


@pytest.mark.parametrize("allocation", [None, {"kind": "power", "power": 0.5,
                                               "control_share": 0.3, "burn_in": 60}])
def test_two_workers_give_the_numbers_of_one(allocation):
    # seeds per scenario and batch (identity): the split over processes changes nothing
    d = parse(design_data(allocation=allocation, drop_if_best_below=0.1))
    one = simulate_design(d, replicates=3_000)
    two = simulate_design(d, replicates=3_000, execution=Execution(jobs=2))
    assert one.equals(two)


def test_one_table_format_for_fixed_and_adaptive_allocation():
    fixed = simulate_design(parse(design_data()), replicates=2_000)
    adaptive = simulate_design(parse(design_data(allocation={"kind": "information"})),
                               replicates=2_000)
    assert list(fixed.columns) == list(adaptive.columns)
    for frame in (fixed, adaptive):
        row = frame.iloc[1]
        # the shares of a block sum to 1 over the arms; sizes add up to the expected n
        for k in (1, 2, 3):
            total = sum(row[f"{a}_block{k}_share"] for a in ("control", "low", "mid", "high"))
            assert total == pytest.approx(1.0, abs=1e-12)
        assert sum(row[f"{a}_look3_n"] for a in ("control", "low", "mid", "high")) == (
            pytest.approx(row["expected_n"], rel=1e-12))
        assert row["low_expected_n"] == pytest.approx(row["low_look3_n"], rel=1e-12)
    # adaptive: the best arm gets more of the later blocks than the worst
    row = adaptive.iloc[1]
    assert row["high_block3_share"] > row["low_block3_share"]
    assert row["high_block1_share"] == row["low_block1_share"] == 0.25


@pytest.mark.parametrize(("change", "key"), [
    (lambda d: d["looks"].__setitem__("futility_predictive", [0.05, 0.05, "none"]),
     "looks.futility_predictive"),
    (lambda d: d.update({
        "endpoint": {"type": "count", "exposure": 1.0, "better": "lower"},
        "hypothesis": {"comparison": "ratio", "kind": "superiority", "margin": 0.0},
        "arms": {a: {"prior": {"distribution": "gamma", "shape": 1.0, "rate": 1.0}}
                 for a in ("control", "low", "mid", "high")},
        "scenarios": {a: [1.0] for a in ("control", "low", "mid", "high")}}),
     "endpoint.type"),
])
def test_unsupported_settings_are_refused_naming_the_key(change, key):
    # (common practice: refuse plainly rather than simulate something else)
    data = design_data(allocation={"kind": "power"})
    change(data)
    with pytest.raises(SettingsError) as info:
        simulate_design(parse(data), replicates=100)
    assert any(p.key == key for p in info.value.problems), info.value
    assert "adaptive" in str(info.value)


class Stop(Exception):
    """Raised by the test's hook to interrupt a run after some scenarios."""


@pytest.mark.parametrize("allocation", [None, {"kind": "information"}])
def test_an_interrupted_run_resumes_with_the_same_numbers(tmp_path, allocation):
    # finished scenarios are kept (DIR/.partial); the resumed run simulates only the
    # others and gives the table of an uninterrupted run (identity: seeds per scenario)
    d = parse(design_data(allocation=allocation))
    clean = simulate_design(d, replicates=2_000)
    partial = tmp_path / ".partial"
    done: list[int] = []

    def stop(index: int) -> None:
        done.append(index)
        raise Stop

    with pytest.raises(Stop):
        simulate_design(d, replicates=2_000,
                        execution=Execution(checkpoints=partial, on_saved=stop))
    assert len(list(partial.glob("*/*.npz"))) == 1
    again: list[int] = []
    resumed = simulate_design(d, replicates=2_000,
                              execution=Execution(checkpoints=partial, on_saved=again.append))
    assert resumed.equals(clean)
    assert again == [i for i in range(len(clean)) if i not in done]


def test_a_tampered_checkpoint_is_simulated_again(tmp_path):
    # a saved scenario whose counts exceed its studies is not used (range checks of
    # octrial/multiarm/tallies.py); the run recomputes it and gives the clean numbers
    d = parse(design_data(allocation={"kind": "information"}))
    clean = simulate_design(d, replicates=2_000)
    partial = tmp_path / ".partial"

    def stop(index: int) -> None:
        raise Stop

    with pytest.raises(Stop):
        simulate_design(d, replicates=2_000,
                        execution=Execution(checkpoints=partial, on_saved=stop))
    (saved,) = partial.glob("*/*.npz")
    with np.load(saved) as data:
        arrays = {name: data[name] for name in data.files}
    arrays["success"] = arrays["success"] + 5_000
    np.savez(saved, **arrays)
    again: list[int] = []
    with pytest.warns(UserWarning):
        resumed = simulate_design(d, replicates=2_000, execution=Execution(
            checkpoints=partial, on_saved=again.append))
    assert resumed.equals(clean)
    assert again == list(range(len(clean)))


def test_tables_beyond_memory_are_refused_before_any_work():
    # the Pr(best) tables grow with the square of the last interim total: 4,000 subjects
    # there need (4001 x 4002 / 2) x 644 x 8 bytes = 41 GiB (docs/adaptive-allocation.md;
    # hand arithmetic), refused naming looks.n before anything is allocated
    d = parse(design_data(n=(1000, 2000, 3000, 4000, 5000),
                          allocation={"kind": "information"}))
    with pytest.raises(SettingsError) as info:
        simulate_design(d, replicates=100)
    assert [p.key for p in info.value.problems] == ["looks.n"]
    assert "GiB" in str(info.value)
