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
``observations[t]``, shape (H, K) for the test's K outcomes.

Hypothesis 0 is always ``none`` (no fault in this circuit).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


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
