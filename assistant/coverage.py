"""How well a ruleset's tests cover its faults: what they can tell apart, and at what cost.

For an author deciding which tests to add or drop:

- **ambiguity groups**: hypotheses no test can tell apart. Two hypotheses are told apart by a
  meter test when at least ``separation`` (default one half) of the readings predicted under
  one fall outside the band the other predicts (its 2.5th-97.5th percentiles widened by three
  standard uncertainties of the meter and one display step); by an observation when their
  outcome probabilities differ by at least ``separation`` in total variation. Hypotheses that no
  test tells apart are joined, and the groups are the connected sets of that relation.
- **expected minutes to isolate** each fault: the mean cost of the tests the diagnosis engine
  asks before it concludes, over ``runs`` simulated diagnoses with readings drawn under that
  fault (``assistant.simulate.draw_reading``), and how often it concluded that very fault;
- **tests that never change any decision**: tests that tell no two hypotheses apart, and tests
  the engine never chose in any of the simulated diagnoses (candidates to drop);
- **faults no complaint leads to**, and **the operating states the tests need**.

:func:`coverage` returns a :class:`Coverage`; :meth:`Coverage.to_json` gives the documented
JSON shape (docs/authoring.md).
"""

from __future__ import annotations

import logging
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from assistant.diagnosis import Conclusion, Context, Diagnosis
from assistant.overlay import apply_priors
from assistant.predict import PredictionTable
from assistant.ruleset.load import LoadedRuleset
from assistant.ruleset.model import Ruleset

log = logging.getLogger("ohmtrail.coverage")

JSON_VERSION = 1
DEFAULT_SEPARATION = 0.5
_BAND = (2.5, 97.5)
_SIGMAS = 3.0


@dataclass(frozen=True)
class FaultCoverage:
    """One hypothesis: whether it can be isolated, and what isolating it costs."""

    id: str
    prior: float
    group: int | None  # index into Coverage.groups, None when some test tells it from every other
    confused_with: tuple[str, ...]  # hypotheses no single test tells it from
    expected_minutes: float | None  # None when not simulated
    concluded_right: float | None  # fraction of simulated diagnoses that ended in this hypothesis
    complaints: tuple[str, ...]  # complaints that lead to it


@dataclass(frozen=True)
class Coverage:
    """The coverage report of one ruleset."""

    ruleset_id: str
    version: str
    sha256: str
    overlays: tuple[str, ...]
    runs: int
    seed: int
    separation: float
    faults: tuple[FaultCoverage, ...]
    groups: tuple[tuple[str, ...], ...]
    separates_nothing: tuple[str, ...]
    never_chosen: tuple[str, ...]
    without_complaint: tuple[str, ...]
    states: tuple[tuple[str, str, tuple[str, ...]], ...]  # (state id, label, tests that need it)
    tests_without_state: tuple[str, ...]

    @property
    def weighted_minutes(self) -> float | None:
        """Expected minutes to isolate, weighted by the hypotheses' priors (None if not simulated)."""
        known = [(f.prior, f.expected_minutes) for f in self.faults if f.expected_minutes is not None]
        if not known:
            return None
        total = sum(p for p, _ in known)
        return sum(p * m for p, m in known) / total if total > 0 else None

    def to_json(self) -> dict[str, Any]:
        """The documented JSON shape (see docs/authoring.md, "coverage --json")."""
        return {
            "coverage": JSON_VERSION,
            "ruleset": {"id": self.ruleset_id, "version": self.version, "sha256": self.sha256,
                        "overlays": list(self.overlays)},
            "settings": {"runs": self.runs, "seed": self.seed, "separation": self.separation},
            "faults": [
                {"id": f.id, "prior": f.prior, "isolable": f.group is None, "group": f.group,
                 "confused_with": list(f.confused_with), "expected_minutes": f.expected_minutes,
                 "concluded_right": f.concluded_right, "complaints": list(f.complaints)}
                for f in self.faults
            ],
            "ambiguity_groups": [list(g) for g in self.groups],
            "weighted_expected_minutes": self.weighted_minutes,
            "tests_never_deciding": (
                [{"id": t, "reason": "separates no two hypotheses"} for t in self.separates_nothing]
                + [{"id": t, "reason": f"never chosen in {self.runs * len(self.faults)} simulated diagnoses"}
                   for t in self.never_chosen]
            ),
            "faults_without_complaint": list(self.without_complaint),
            "states": [{"id": s, "label": label, "tests": list(tests)} for s, label, tests in self.states],
            "tests_without_state": list(self.tests_without_state),
        }


# --------------------------------------------------------------------------- separability


def _band(values: np.ndarray, sigma: np.ndarray, step: np.ndarray) -> tuple[float, float, float]:
    """(low, high, OL fraction) of one hypothesis's predicted readings of one test."""
    finite = np.isfinite(values)
    ol = 1.0 - float(finite.mean()) if values.size else 0.0
    if not finite.any():
        return np.nan, np.nan, ol
    v = values[finite]
    widen = _SIGMAS * float(np.median(sigma[finite])) + float(np.median(step[finite]))
    low, high = np.percentile(v, _BAND)
    return float(low) - widen, float(high) + widen, ol


def _outside(values: np.ndarray, band: tuple[float, float, float]) -> float:
    """Fraction of ``values`` a reading under the other hypothesis would not give."""
    low, high, ol = band
    finite = np.isfinite(values)
    if np.isnan(low):  # the other always reads OL: only finite readings are outside
        return float(finite.mean())
    inside = finite & (values >= low) & (values <= high)
    if ol > 0.05:  # the other reads OL often enough that OL is no surprise
        inside |= ~finite
    return 1.0 - float(inside.mean())


def separation_matrix(table: PredictionTable) -> np.ndarray:
    """``sep[t, a, b]``: how well test ``t`` tells hypothesis ``a`` from ``b`` (0 to 1, symmetric)."""
    n_h, n_t = len(table.hypotheses), len(table.tests)
    sep = np.zeros((n_t, n_h, n_h))
    for t in range(n_t):
        if t in table.observations:
            rows = np.asarray(table.observations[t], dtype=float)
            sep[t] = 0.5 * np.abs(rows[:, None, :] - rows[None, :, :]).sum(axis=2)
            continue
        samples = table.samples[:, t, :]
        bands = [_band(samples[h], table.sigma[h, t, :], table.resolution[h, t, :]) for h in range(n_h)]
        for a in range(n_h):
            for b in range(a + 1, n_h):
                value = max(_outside(samples[a], bands[b]), _outside(samples[b], bands[a]))
                sep[t, a, b] = sep[t, b, a] = value
    return sep


def ambiguity_groups(table: PredictionTable, separation: float = DEFAULT_SEPARATION
                     ) -> tuple[tuple[tuple[str, ...], ...], dict[str, tuple[str, ...]], tuple[str, ...]]:
    """The groups no test tells apart, each hypothesis's direct partners, and the tests that separate nothing."""
    ids = [h.id for h in table.hypotheses]
    sep = separation_matrix(table)
    told = (sep >= separation).any(axis=0) if sep.size else np.zeros((len(ids), len(ids)), dtype=bool)
    parent = list(range(len(ids)))

    def find(x: int) -> int:
        while parent[x] != x:
            parent[x] = parent[parent[x]]
            x = parent[x]
        return x

    partners: dict[str, tuple[str, ...]] = {}
    for a in range(len(ids)):
        same = [b for b in range(len(ids)) if b != a and not told[a, b]]
        partners[ids[a]] = tuple(ids[b] for b in same)
        for b in same:
            parent[find(b)] = find(a)
    members: dict[int, list[str]] = {}
    for i, hid in enumerate(ids):
        members.setdefault(find(i), []).append(hid)
    groups = tuple(tuple(m) for m in members.values() if len(m) > 1)
    useless = tuple(table.tests[t].id for t in range(len(table.tests)) if not (sep[t] >= separation).any())
    return groups, partners, useless


# --------------------------------------------------------------------------- simulation


DrawReading = Callable[..., Any]


def isolation_minutes(loaded: LoadedRuleset, table: PredictionTable, hypothesis: int, runs: int,
                      rng: np.random.Generator, draw: DrawReading | None = None,
                      context: Context | None = None) -> tuple[float, float, set[str]]:
    """Mean minutes to conclude under one hypothesis, the fraction concluded right, and the tests asked."""
    if draw is None:
        from assistant.simulate import draw_reading as draw
    index = {t.id: i for i, t in enumerate(table.tests)}
    target = table.hypotheses[hypothesis].id
    minutes: list[float] = []
    right = 0
    asked: set[str] = set()
    for _ in range(runs):
        state = Diagnosis.start(loaded, table, context or Context())
        spent = 0.0
        for _step in range(2 * len(table.tests) + 2):
            step = state.next()
            if isinstance(step, Conclusion):
                right += step.diagnosis == target
                break
            t = index[step.test_id]
            state = state.answer(step.test_id, draw(table, hypothesis, t, rng))
            spent += table.tests[t].cost_minutes
            asked.add(step.test_id)
        minutes.append(spent)
    return float(np.mean(minutes)), right / runs, asked


# --------------------------------------------------------------------------- the report


def _complaints_leading_to(ruleset: Ruleset, fault_id: str) -> tuple[str, ...]:
    component = fault_id.split(".", 1)[0]
    return tuple(c.id for c in ruleset.complaints
                 if not c.suspects or fault_id in c.suspects or component in c.suspects)


def coverage(loaded: LoadedRuleset, table: PredictionTable, *, runs: int = 4, seed: int = 0,
             separation: float = DEFAULT_SEPARATION, draw: DrawReading | None = None) -> Coverage:
    """The coverage report of a ruleset from its prediction table (``runs`` 0: no simulation)."""
    rs = loaded.ruleset
    table = apply_priors(table, rs)
    groups, partners, useless = ambiguity_groups(table, separation)
    group_of = {hid: i for i, g in enumerate(groups) for hid in g}
    rng = np.random.default_rng(seed)
    chosen: set[str] = set()
    faults: list[FaultCoverage] = []
    for h, hyp in enumerate(table.hypotheses):
        minutes: float | None = None
        right: float | None = None
        if runs > 0 and hyp.prior > 0:
            minutes, right, asked = isolation_minutes(loaded, table, h, runs, rng, draw)
            chosen |= asked
        complaints = () if hyp.id == "none" else _complaints_leading_to(rs, hyp.id)
        faults.append(FaultCoverage(hyp.id, hyp.prior, group_of.get(hyp.id), partners.get(hyp.id, ()),
                                    minutes, right, complaints))
    never = tuple(t.id for t in table.tests if runs > 0 and t.id not in chosen and t.id not in useless)
    without = tuple(f.id for f in faults if f.id != "none" and "+" not in f.id and not f.complaints)
    states = tuple((name, st.label, tuple(t.id for t in rs.tests if t.state == name)) for name, st in rs.states.items())
    log.info("%s: %d groups, %d tests separate nothing, %d never chosen", rs.id, len(groups), len(useless), len(never))
    return Coverage(rs.id, rs.version, loaded.sha256, loaded.overlays, runs, seed, separation, tuple(faults),
                    groups, useless, never, without, states, tuple(t.id for t in rs.tests if t.state is None))
