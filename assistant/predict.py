"""Predicted meter readings: for every hypothesis and every test, a sampled distribution.

This module holds the table the diagnosis engine reads (:class:`PredictionTable`). The
circuit engine fills it (Monte Carlo over component tolerances and fault magnitudes, through
the meter model); beliefs and the planner only read it.

Array layout: ``samples[h, t, s]`` is sample ``s`` of what the meter would display for test
``t`` if hypothesis ``h`` were true, in SI units (V, ohm, A), quantised to the range's
resolution, before the meter's random error. ``+inf`` (or ``-inf``) stands for an OL display.
``sigma[h, t, s]`` is the meter's standard uncertainty for that display (the accuracy bound
divided by sqrt(3), JCGM 100:2008), ``resolution[h, t, s]`` the display step of the range in
use. Observation tests have NaN samples; their P(outcome | hypothesis) is in
``observations[t]``, shape (H, K) for the test's K outcomes. An observation that follows the
circuit (``seen``) has, as its samples, the index of the answer each variant shows (sigma and
resolution 0), and its rows are those answers' shares with the misjudged chance spread over the
others.

Hypothesis 0 is always ``none`` (no fault in this circuit).
"""

from __future__ import annotations

import dataclasses
import functools
import hashlib
import json
import logging
import math
import os
import tempfile
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from assistant.errors import CircuitError
from assistant.ruleset.defaults import Fault, fault_list
from assistant.ruleset.load import LoadedRuleset
from assistant.ruleset.model import Ruleset

if TYPE_CHECKING:
    from assistant.meter import MeterProfile


@dataclass(frozen=True)
class Hypothesis:
    """One explanation of the complaint: no fault, a single fault, or a pair of faults."""

    id: str  # "none", "<component>.<mode>", or "<fault>+<fault>" for a pair
    faults: tuple[str, ...]  # () for none
    prior: float  # normalised prior weight from the ruleset (before complaint and rules)
    repair: str
    repair_minutes: float


@dataclass(frozen=True)
class TestInfo:
    """What the diagnosis engine needs to know of one test."""

    id: str
    kind: str  # voltage | drop | resistance | current | fuse_drop | observation
    unit: str  # "V", "ohm", "A"; "" for observations
    cost_minutes: float
    state: str | None
    outcomes: tuple[str, ...] = ()  # observation outcomes; () for meter tests
    points: tuple[str, ...] = ()  # where the leads go: (red, black) nodes; the part for current tests
    jack: str = "auto"  # current tests: the jack the ruleset asks for (auto, 10A, mA, clamp)
    prepare: tuple[tuple[str, float], ...] = ()  # the preparations it needs, with their minutes
    instrument: str = "meter"  # voltage tests: "meter", or "scan_tool" for a module's live data
    # observations whose answer follows the circuit (``seen``): the chance of another answer
    # than the one each sample shows; None for the others
    misjudged: float | None = None


@dataclass(frozen=True, eq=False)
class PredictionTable:
    """Every hypothesis × every test: sampled meter displays, their uncertainty, and observations."""

    ruleset_id: str
    ruleset_sha256: str
    hypotheses: tuple[Hypothesis, ...]
    tests: tuple[TestInfo, ...]
    samples: np.ndarray  # (H, T, S) float64, SI; ±inf = OL; NaN for observation tests
    sigma: np.ndarray  # (H, T, S) float64, standard uncertainty of the display
    resolution: np.ndarray  # (H, T, S) float64, display step of the range in use
    observations: dict[int, np.ndarray] = field(default_factory=dict)  # t -> (H, K)

    def hypothesis_index(self, hypothesis_id: str) -> int:
        """Position of a hypothesis by id (KeyError if absent)."""
        for i, h in enumerate(self.hypotheses):
            if h.id == hypothesis_id:
                return i
        raise KeyError(hypothesis_id)

    def test_index(self, test_id: str) -> int:
        """Position of a test by id (KeyError if absent)."""
        for i, t in enumerate(self.tests):
            if t.id == test_id:
                return i
        raise KeyError(test_id)


# --------------------------------------------------------------------------- computing the table

ENGINE_VERSION = "2"  # bump when the table's meaning changes; the engine's own source is hashed as well
log = logging.getLogger("ohmtrail.predict")
QUANTILES = (0.05, 0.5, 0.95)
GROUP_NODE_VARIANTS = 2e7  # variants × nodes × right-hand sides at once (160 MB); bounds memory


def hypotheses_of(ruleset: Ruleset, pairs: Sequence[tuple[str, str]] = ()
                  ) -> tuple[tuple[Hypothesis, ...], tuple[tuple[str, tuple[Fault, ...]], ...]]:
    """The hypotheses in table order, and each one's faults: none, every fault, the pairs asked for."""
    faults = fault_list(ruleset)
    total = ruleset.none_weight + sum(f.weight for f in faults)
    if total <= 0:
        raise CircuitError(f"ruleset '{ruleset.id}' gives no hypothesis a positive weight")
    hyps = [Hypothesis("none", (), ruleset.none_weight / total, "No repair: the circuit is working", 0.0)]
    members: list[tuple[str, tuple[Fault, ...]]] = [("none", ())]
    by_id = {f.id: f for f in faults}
    for f in faults:
        hyps.append(Hypothesis(f.id, (f.id,), f.weight / total, f.repair, f.repair_minutes))
        members.append((f.id, (f,)))
    for a, b in pairs:
        missing = [x for x in (a, b) if x not in by_id]
        if missing:
            raise CircuitError(f"pair {a}+{b}: unknown fault '{missing[0]}' in ruleset '{ruleset.id}'")
        fa, fb = by_id[a], by_id[b]
        hyps.append(Hypothesis(f"{a}+{b}", (a, b), (fa.weight / total) * (fb.weight / total),
                               f"{fa.repair}; {fb.repair}", fa.repair_minutes + fb.repair_minutes))
        members.append((f"{a}+{b}", (fa, fb)))
    return tuple(hyps), tuple(members)


def test_infos(ruleset: Ruleset) -> tuple[TestInfo, ...]:
    """What the diagnosis engine sees of each test, in ruleset order."""
    from assistant.circuit.measure import measurement_for
    from assistant.circuit.netlist import CircuitModel

    model = CircuitModel(ruleset)
    infos = []
    for test in ruleset.tests:
        prepare = tuple((ref, ruleset.preparations[ref].cost) for ref in test.prepare)
        if test.kind == "observation":
            infos.append(TestInfo(test.id, test.kind, "", test.cost, test.state, tuple(test.outcomes),
                                  prepare=prepare, misjudged=test.misjudged_chance if test.seen is not None else None))
            continue
        m = measurement_for(test, model)
        infos.append(TestInfo(test.id, test.kind, m.unit, test.cost, m.state, (), m.points(),
                              getattr(test, "jack", "auto"), prepare, getattr(test, "instrument", "meter")))
    return tuple(infos)


def predict(
    loaded: LoadedRuleset,
    meter: MeterProfile | None = None,
    *,
    samples: int = 64,
    seed: int = 0,
    pairs: Sequence[tuple[str, str]] = (),
    cache: bool = True,
) -> PredictionTable:
    """Every hypothesis × every test of a ruleset: what the meter would show, sampled.

    Monte Carlo over component tolerances and fault magnitudes (``samples`` per hypothesis,
    deterministic for a ``seed``), through the meter model. Cached on disk by the ruleset's
    content, the meter profile and these arguments (``$OHMTRAIL_CACHE`` or the user cache dir).
    """
    from assistant.meter import default_meter

    if samples < 1:
        raise CircuitError("samples must be at least 1")
    profile = meter or default_meter()
    pairs = tuple((str(a), str(b)) for a, b in pairs)
    key = _cache_key(loaded, profile, samples, seed, pairs)
    if cache:
        hit = _load_cached(key, loaded)
        if hit is not None:
            return hit
    table = compute_table(loaded, profile, samples=samples, seed=seed, pairs=pairs)
    if cache:
        _store(key, table)
    return table


def compute_table(loaded: LoadedRuleset, meter: MeterProfile, *, samples: int = 64, seed: int = 0,
                  pairs: Sequence[tuple[str, str]] = (), nominal: bool = False) -> PredictionTable:
    """The prediction table, computed (no cache)."""
    from assistant.circuit.measure import (
        Env,
        ResistanceMeasurement,
        SeenObservation,
        measurement_for,
        observation_rows,
        seen_rows,
    )
    from assistant.circuit.netlist import CircuitModel
    from assistant.circuit.operating import operate_states

    ruleset = loaded.ruleset
    hyps, members = hypotheses_of(ruleset, pairs)
    model = CircuitModel(ruleset)
    meter_tests = {t.id: measurement_for(t, model) for t in ruleset.tests if t.kind != "observation"}
    seen = {t.id: SeenObservation(t, model) for t in ruleset.tests if t.kind == "observation" and t.seen is not None}
    probes: dict[str, list[tuple[str, str]]] = {}
    for m in meter_tests.values():
        for pair in m.probes():
            if pair not in probes.setdefault(m.state, []):
                probes[m.state].append(pair)
    ohms_probes: dict[tuple[str, tuple[str, ...], tuple[str, ...]], list[tuple[str, str]]] = {}
    for m in meter_tests.values():
        if isinstance(m, ResistanceMeasurement):
            pair = (m.points()[0], m.points()[1])
            if pair not in ohms_probes.setdefault(m.setup(), []):
                ohms_probes[m.setup()].append(pair)
    H, T, S = len(hyps), len(ruleset.tests), samples
    shape = (H, T, S)
    out_samples, out_sigma, out_res = np.full(shape, np.nan), np.full(shape, np.nan), np.full(shape, np.nan)
    # large circuits go in groups of hypotheses, each led by "none" (the jack choice and the
    # lead placement of current tests are taken from the no-fault circuit)
    columns = 1 + max((len(v) for v in probes.values()), default=0)
    per_group = max(1, int(GROUP_NODE_VARIANTS // (S * len(model.nodes) * columns)))
    for lo in range(1, max(H, 2), per_group):
        rows = [0] + list(range(lo, min(H, lo + per_group)))
        group = [members[h] for h in rows]
        batch = model.batch(group, samples, seed=seed, nominal=nominal)
        points = operate_states(model, batch, probes)
        blown = {f.id: np.logical_or.reduce([p.blown[f.id] for p in points.values()]) for f in model.fuses}
        env = Env(model, batch, meter, points, blown, slice(0, samples), ohms_probes)
        for t, test in enumerate(ruleset.tests):
            if test.id in seen:  # the answer each variant shows, as its index; no meter error
                out_samples[rows, t, :] = seen[test.id].answers(env).reshape(len(rows), S)
                out_sigma[rows, t, :] = out_res[rows, t, :] = 0.0
                continue
            if test.kind == "observation":
                continue
            shown = meter_tests[test.id].display(env)
            out_samples[rows, t, :] = shown.samples.reshape(len(rows), S)
            out_sigma[rows, t, :] = shown.sigma.reshape(len(rows), S)
            out_res[rows, t, :] = shown.resolution.reshape(len(rows), S)
    observations = {t: (seen_rows(out_samples[:, t, :], len(test.outcomes), test.misjudged_chance) if test.id in seen
                        else observation_rows(test, members))
                    for t, test in enumerate(ruleset.tests) if test.kind == "observation"}
    log.info("predicted %d hypotheses x %d tests x %d samples for %s", H, T, S, ruleset.id)
    return PredictionTable(ruleset.id, loaded.sha256, hyps, test_infos(ruleset), out_samples, out_sigma,
                           out_res, observations)


# --------------------------------------------------------------------------- summary


def summarise(table: PredictionTable) -> dict[str, dict[str, dict[str, Any]]]:
    """Per hypothesis per test: median and 5th/95th percentiles with the unit; "OL" for overloads.

    Observation tests give the most likely outcome as the median, and every outcome's
    probability under ``p``.
    """
    out: dict[str, dict[str, dict[str, Any]]] = {}
    for h, hyp in enumerate(table.hypotheses):
        row: dict[str, dict[str, Any]] = {}
        for t, test in enumerate(table.tests):
            if t in table.observations:
                probs = table.observations[t][h]
                row[test.id] = {"median": test.outcomes[int(np.argmax(probs))], "low": None, "high": None,
                                "unit": "", "p": {o: float(p) for o, p in zip(test.outcomes, probs, strict=True)}}
                continue
            values = np.sort(table.samples[h, t])
            low, median, high = (_shown(float(np.quantile(values, q, method="inverted_cdf"))) for q in QUANTILES)
            row[test.id] = {"median": median, "low": low, "high": high, "unit": test.unit}
        out[hyp.id] = row
    return out


def _shown(value: float) -> float | str:
    return "OL" if math.isinf(value) else value


# --------------------------------------------------------------------------- cache


def cache_dir() -> Path:
    """Where predictions are cached: ``$OHMTRAIL_CACHE`` or the user cache dir."""
    env = os.environ.get("OHMTRAIL_CACHE")
    if env:
        return Path(env)
    import platformdirs

    return Path(platformdirs.user_cache_dir("ohmtrail")) / "predictions"


def _cache_key(loaded: LoadedRuleset, meter: MeterProfile, samples: int, seed: int,
               pairs: tuple[tuple[str, str], ...]) -> str:
    parts = {
        "engine": ENGINE_VERSION,
        "engine_source": _engine_fingerprint(),
        "ruleset_sha256": loaded.sha256,
        "overlays": list(loaded.overlays),
        "ruleset": hashlib.sha256(loaded.ruleset.model_dump_json().encode()).hexdigest(),
        "meter": hashlib.sha256(meter.model_dump_json().encode()).hexdigest(),
        "samples": samples,
        "seed": seed,
        "pairs": [list(p) for p in pairs],
    }
    return hashlib.sha256(json.dumps(parts, sort_keys=True).encode()).hexdigest()[:40]


@functools.lru_cache(maxsize=1)
def _engine_fingerprint() -> str:
    """SHA-256 over the source of the modules that compute the table: a changed model never reads
    a stale cache."""
    package = Path(__file__).resolve().parent
    digest = hashlib.sha256()
    for path in sorted((package / "circuit").glob("*.py")) + [package / "meter.py", package / "predict.py"]:
        try:
            digest.update(path.read_bytes())
        except OSError:  # an installed package without its sources: the version alone keys it
            digest.update(path.name.encode())
    return digest.hexdigest()


def _load_cached(key: str, loaded: LoadedRuleset) -> PredictionTable | None:
    path = cache_dir() / f"{key}.npz"
    if not path.is_file():
        return None
    try:
        with np.load(path, allow_pickle=False) as data:
            meta = json.loads(str(data["meta"]))
            observations = {int(t): data[f"obs_{t}"].copy() for t in meta["observations"]}
            return PredictionTable(
                meta["ruleset_id"], meta["ruleset_sha256"],
                tuple(Hypothesis(h["id"], tuple(h["faults"]), h["prior"], h["repair"], h["repair_minutes"])
                      for h in meta["hypotheses"]),
                tuple(TestInfo(t["id"], t["kind"], t["unit"], t["cost_minutes"], t["state"], tuple(t["outcomes"]),
                               tuple(t["points"]), t["jack"], tuple((str(r), float(m)) for r, m in t["prepare"]),
                               t["instrument"], t["misjudged"])
                      for t in meta["tests"]),
                data["samples"].copy(), data["sigma"].copy(), data["resolution"].copy(), observations)
    except (OSError, ValueError, KeyError, TypeError) as exc:
        log.warning("ignoring unreadable cached predictions %s: %s", path, exc)
        return None


def _store(key: str, table: PredictionTable) -> None:
    folder = cache_dir()
    meta = {
        "ruleset_id": table.ruleset_id,
        "ruleset_sha256": table.ruleset_sha256,
        "hypotheses": [dataclasses.asdict(h) for h in table.hypotheses],
        "tests": [dataclasses.asdict(t) for t in table.tests],
        "observations": sorted(table.observations),
    }
    arrays: dict[str, Any] = {"meta": np.array(json.dumps(meta)), "samples": table.samples, "sigma": table.sigma,
                              "resolution": table.resolution}
    arrays.update({f"obs_{t}": rows for t, rows in table.observations.items()})
    try:
        folder.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(dir=folder, suffix=".tmp")
        with os.fdopen(fd, "wb") as fh:
            np.savez(fh, **arrays)
        os.replace(tmp, folder / f"{key}.npz")
    except OSError as exc:  # a read-only cache costs speed, never the answer
        log.warning("could not cache predictions in %s: %s", folder, exc)


# --------------------------------------------------------------------------- output shapes


def prediction_json(table: PredictionTable, fault: str | None = None) -> dict[str, Any]:
    """The ``ohmtrail predict --json`` document (``fault``: only it and ``none``)."""
    hyps = _selected(table, fault)
    summary = summarise(table)
    return {
        "ruleset": table.ruleset_id,
        "ruleset_sha256": table.ruleset_sha256,
        "samples": int(table.samples.shape[2]),
        "faults": [{"id": h.id, "component": None if not h.faults else _component(h.faults[0]),
                    "mode": None if not h.faults else "+".join(f.split(".", 1)[1] for f in h.faults),
                    "prior": h.prior} for h in hyps],
        "tests": [{"id": t.id, "kind": t.kind, "unit": t.unit, "cost_minutes": t.cost_minutes, "state": t.state}
                  for t in table.tests],
        "predictions": {h.id: summary[h.id] for h in hyps},
    }


def prediction_text(table: PredictionTable, fault: str | None = None) -> str:
    """A readable table: hypotheses down, tests across (medians); with ``fault``, ranges per test."""
    summary = summarise(table)
    hyps = _selected(table, fault)
    if fault is not None:
        lines = [f"{table.ruleset_id}: predicted readings (median, 5th-95th percentile of "
                 f"{table.samples.shape[2]} samples)"]
        for h in hyps:
            lines.append(f"\n{h.id}  (prior {h.prior:.3f})")
            for t in table.tests:
                cell = summary[h.id][t.id]
                if t.kind == "observation":
                    probs = ", ".join(f"{o} {p:.2f}" for o, p in cell["p"].items())
                    lines.append(f"  {t.id:<24} {probs}")
                else:
                    lines.append(f"  {t.id:<24} {_cell(cell['median']):>8} {t.unit:<3}  "
                                 f"[{_cell(cell['low'])} .. {_cell(cell['high'])}]")
        return "\n".join(lines)
    width = max(len(h.id) for h in hyps)
    cols = [max(8, len(t.id) + 1) for t in table.tests]
    head = " " * (width + 2) + "".join(f"{t.id:>{c}}" for t, c in zip(table.tests, cols, strict=True))
    units = " " * (width + 2) + "".join(f"{t.unit or 'obs':>{c}}" for t, c in zip(table.tests, cols, strict=True))
    lines = [f"{table.ruleset_id}: median predicted reading per hypothesis ({table.samples.shape[2]} samples; "
             "--fault ID for ranges, --json for everything)", head, units]
    for h in hyps:
        cells = "".join(f"{_cell(summary[h.id][t.id]['median']):>{c}}" for t, c in zip(table.tests, cols, strict=True))
        lines.append(f"{h.id:<{width}}  {cells}")
    return "\n".join(lines)


def _selected(table: PredictionTable, fault: str | None) -> tuple[Hypothesis, ...]:
    if fault is None:
        return table.hypotheses
    if fault not in {h.id for h in table.hypotheses}:
        raise CircuitError(f"ruleset '{table.ruleset_id}' has no fault '{fault}' (see ohmtrail predict without --fault)")
    return tuple(h for h in table.hypotheses if h.id in ("none", fault))


def _component(fault_id: str) -> str:
    return fault_id.split(".", 1)[0]


def _cell(value: Any) -> str:
    if isinstance(value, float):
        return f"{value:.4g}"
    return str(value)
