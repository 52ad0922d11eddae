"""Synthetic prediction tables for the diagnosis engine's tests (invented numbers, demo only).

They stand in for the circuit engine's output: each hypothesis × test is a normal or uniform
draw, an OL display, or an observation row, quantised like a meter display.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import replace
from pathlib import Path
from typing import Any

import numpy as np

from assistant.predict import Hypothesis, PredictionTable, TestInfo
from assistant.ruleset import LoadedRuleset, fault_list, load_ruleset

DATA = Path(__file__).resolve().parent / "data" / "diagnosis"
TINY_LAMP = DATA / "tiny_lamp.yaml"
SEEN_LAMP = DATA / "seen_lamp.yaml"

UNITS = {"voltage": "V", "drop": "V", "resistance": "ohm", "current": "A", "fuse_drop": "A", "observation": ""}
RESOLUTION = {"V": 0.01, "ohm": 0.1, "A": 0.001}

Spec = Any  # (mean, sd) | ("uniform", lo, hi) | "OL" | {"yes": p, "no": q}


def infos_of(loaded: LoadedRuleset) -> tuple[TestInfo, ...]:
    """The TestInfo of every test of a ruleset, as the circuit engine gives them."""
    infos = []
    for t in loaded.ruleset.tests:
        outcomes = tuple(getattr(t, "outcomes", ()) or ())
        prepare = tuple((ref, loaded.ruleset.preparations[ref].cost) for ref in t.prepare)
        infos.append(TestInfo(t.id, t.kind, UNITS[t.kind], t.cost, t.state, outcomes, prepare=prepare))
    return tuple(infos)


def hypotheses_of(loaded: LoadedRuleset) -> tuple[Hypothesis, ...]:
    """"none" then every fault of the ruleset, priors normalised as the contract says."""
    faults = fault_list(loaded.ruleset)
    total = loaded.ruleset.none_weight + sum(f.weight for f in faults)
    hyps = [Hypothesis("none", (), loaded.ruleset.none_weight / total, "No repair", 0.0)]
    hyps += [Hypothesis(f.id, (f.id,), f.weight / total, f.repair, f.repair_minutes) for f in faults]
    return tuple(hyps)


def build_table(hypotheses: Sequence[Hypothesis], tests: Sequence[TestInfo],
                spec: Mapping[str, Mapping[str, Spec]], *, samples: int = 64, seed: int = 0,
                default: Mapping[str, Spec] | None = None) -> PredictionTable:
    """A table from per-hypothesis, per-test specs (``default`` for those not given)."""
    rng = np.random.default_rng(seed)
    n_h, n_t = len(hypotheses), len(tests)
    x = np.full((n_h, n_t, samples), np.nan)
    res = np.full((n_h, n_t, samples), np.nan)
    observations: dict[int, np.ndarray] = {}
    for t, info in enumerate(tests):
        if info.kind == "observation":
            rows = []
            for h in hypotheses:
                row = (spec.get(h.id, {}).get(info.id) or (default or {}).get(info.id)
                       or {o: 1 / len(info.outcomes) for o in info.outcomes})
                rows.append([row[o] for o in info.outcomes])
            observations[t] = np.array(rows, dtype=float)
            continue
        step = RESOLUTION[info.unit]
        for i, h in enumerate(hypotheses):
            s = spec.get(h.id, {}).get(info.id, (default or {}).get(info.id))
            if s is None:
                raise KeyError(f"no spec for {h.id} / {info.id}")
            if s == "OL":
                draw = np.full(samples, np.inf)
            elif isinstance(s, tuple) and s and s[0] == "uniform":
                draw = rng.uniform(s[1], s[2], samples)
            elif isinstance(s, tuple) and s and s[0] == "mix":  # ("mix", fraction OL, mean, sd)
                draw = rng.normal(s[2], s[3], samples)
                draw[rng.random(samples) < s[1]] = np.inf
            else:
                draw = rng.normal(s[0], s[1], samples)
            x[i, t] = np.where(np.isfinite(draw), np.round(draw / step) * step, draw)
            res[i, t] = step
    # meter accuracy ±(0.5 % + 2 counts), standard uncertainty = half-width / sqrt(3) (JCGM 100:2008)
    sigma = np.where(np.isfinite(x), (0.005 * np.abs(np.nan_to_num(x, posinf=0.0)) + 2 * np.nan_to_num(res))
                     / np.sqrt(3.0), 0.0)
    return PredictionTable("synthetic", "0" * 64, tuple(hypotheses), tuple(tests), x, sigma,
                           np.nan_to_num(res, nan=0.01), observations)


TINY_SPEC: dict[str, dict[str, Spec]] = {
    "none": {"v_feed": (12.3, 0.05), "drop_gnd": (0.02, 0.005), "r_lamp": (0.6, 0.05)},
    "fuse.blown": {"v_feed": (0.0, 0.0), "drop_gnd": (0.0, 0.0), "r_lamp": (0.6, 0.05),
                   "look_fuse": {"yes": 0.9, "no": 0.1}},
    "feed.open": {"v_feed": (0.0, 0.0), "drop_gnd": (0.0, 0.0), "r_lamp": (0.6, 0.05)},
    "feed.short_to_ground": {"v_feed": (0.0, 0.0), "drop_gnd": (0.0, 0.0), "r_lamp": (0.6, 0.05),
                             "look_fuse": {"yes": 0.9, "no": 0.1}},
    "lamp.filament_open": {"v_feed": (12.6, 0.02), "drop_gnd": (0.0, 0.0), "r_lamp": "OL"},
    "lamp.high_resistance": {"v_feed": (12.5, 0.03), "drop_gnd": (0.005, 0.003), "r_lamp": ("uniform", 3.0, 30.0)},
    "strap.high_resistance": {"v_feed": (12.4, 0.05), "drop_gnd": ("uniform", 1.0, 6.0), "r_lamp": (0.6, 0.05)},
}
TINY_DEFAULT = {"look_fuse": {"yes": 0.02, "no": 0.98}}


def tiny_lamp() -> tuple[LoadedRuleset, PredictionTable]:
    """The one-lamp test ruleset and its synthetic table."""
    loaded = load_ruleset(TINY_LAMP)
    table = build_table(hypotheses_of(loaded), infos_of(loaded), TINY_SPEC, default=TINY_DEFAULT)
    return loaded, table


def seen_lamp() -> tuple[LoadedRuleset, PredictionTable]:
    """A one-lamp ruleset with a look that follows the circuit, and its table from the circuit
    engine itself (not synthetic: the look's answers are the lamp's current in each sample)."""
    from assistant.predict import predict

    loaded = load_ruleset(SEEN_LAMP)
    return loaded, predict(loaded, samples=64, seed=3, cache=False)


def all_healthy(table: PredictionTable) -> PredictionTable:
    """The same table with every hypothesis showing what "none" shows: vehicles with no fault."""
    none = table.hypothesis_index("none")
    n = len(table.hypotheses)
    return replace(table, samples=np.repeat(table.samples[none:none + 1], n, axis=0),
                   observations={t: np.repeat(rows[none:none + 1], n, axis=0)
                                 for t, rows in table.observations.items()})


def random_table(n_hypotheses: int, n_tests: int, *, samples: int = 32, seed: int = 0,
                 levels: int = 6) -> PredictionTable:
    """A harness table: every test a voltage whose mean under each hypothesis is one of a few
    levels (so tests split the hypotheses in different ways), with tolerance spread."""
    rng = np.random.default_rng(seed)
    priors = rng.dirichlet(np.ones(n_hypotheses))
    hyps = tuple(Hypothesis("none" if i == 0 else f"c{i}.open", () if i == 0 else (f"c{i}.open",),
                            float(priors[i]), "Repair", float(rng.uniform(5, 60))) for i in range(n_hypotheses))
    tests = tuple(TestInfo(f"t{j}", "voltage", "V", float(rng.uniform(1, 8)), None) for j in range(n_tests))
    level = rng.integers(0, levels, size=(n_hypotheses, n_tests)) * (12.0 / levels)
    x = level[:, :, None] + rng.normal(0, 0.05, size=(n_hypotheses, n_tests, samples))
    x = np.round(x / 0.01) * 0.01
    sigma = (0.005 * np.abs(x) + 0.02) / np.sqrt(3.0)
    res = np.full_like(x, 0.01)
    return PredictionTable("harness", "1" * 64, hyps, tests, x, sigma, res, {})


def flat_table(loaded: LoadedRuleset) -> PredictionTable:
    """A table where every meter test reads 12 V under every hypothesis and every observation is
    a toss-up: enough for what depends only on the ruleset's tests (the walk's path)."""
    infos = infos_of(loaded)
    default = {i.id: {o: 1 / len(i.outcomes) for o in i.outcomes} if i.kind == "observation" else (12.0, 0.1)
               for i in infos}
    return build_table(hypotheses_of(loaded), infos, {}, default=default)
