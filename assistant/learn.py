"""Prior fault weights updated from repair counts by Dirichlet (additive) smoothing.

The ruleset's fault weights ``w_i`` (total ``W``) are read as the mean of a Dirichlet prior
over which fault a repair of this circuit turns out to be, with ``strength`` pseudo-repairs
in all: ``alpha_i = strength * w_i / W``. After ``n_i`` confirmed repairs of fault ``i``
(``N`` in all) the posterior is Dirichlet(``alpha_i + n_i``) and its mean is

    E[p_i | n] = (alpha_i + n_i) / (strength + N)

(the Dirichlet-multinomial posterior mean; Gelman et al., *Bayesian Data Analysis*, 3rd ed.,
section 3.4; Murphy, *Machine Learning: A Probabilistic Perspective*, section 3.4). The new
weights are that mean times ``W``, so the fault total and the weight of "none" stay as they
were and only the split between faults moves. A fault seen once cannot drown the rest: the
strength (by default one pseudo-repair per fault) holds the prior in place until the counts
outweigh it. Faults never repaired keep a positive weight.

Repairs of "none" (no fault found) do not count: a repair history says which fault a repair
was, not how often the circuit was sound.
"""

from __future__ import annotations

import logging
from collections import Counter
from collections.abc import Iterable, Mapping
from dataclasses import dataclass

from assistant.history import Repair
from assistant.ruleset.defaults import fault_list
from assistant.ruleset.model import Ruleset

log = logging.getLogger("ohmtrail.learn")


@dataclass(frozen=True)
class Uncounted:
    """A repair that was not counted, and why."""

    source: str
    fault_id: str
    reason: str  # "unknown fault", "switched off", "no fault found"


@dataclass(frozen=True)
class Learning:
    """The outcome of learning from repairs: counts, prior and new weights per fault."""

    ruleset_id: str
    strength: float
    counts: Mapping[str, int]  # fault id -> confirmed repairs
    old: Mapping[str, float]  # fault id -> weight before
    new: Mapping[str, float]  # fault id -> weight after
    uncounted: tuple[Uncounted, ...]

    @property
    def repairs(self) -> int:
        """How many repairs were counted."""
        return sum(self.counts.values())

    def changed(self, rel_tol: float = 1e-6) -> tuple[str, ...]:
        """Fault ids whose weight moved by more than ``rel_tol`` of the old weight."""
        return tuple(f for f in self.old if abs(self.new[f] - self.old[f]) > rel_tol * self.old[f])


def dirichlet_posterior_mean(alpha: Mapping[str, float], counts: Mapping[str, int]) -> dict[str, float]:
    """Posterior mean of Dirichlet(alpha) after multinomial counts: (alpha_i + n_i) / (sum alpha + N)."""
    if any(a <= 0 for a in alpha.values()):
        raise ValueError("every Dirichlet parameter must be positive")
    unknown = set(counts) - set(alpha)
    if unknown:
        raise ValueError(f"counts for categories without a prior: {sorted(unknown)}")
    total = sum(alpha.values()) + sum(counts.values())
    return {k: (a + counts.get(k, 0)) / total for k, a in alpha.items()}


def smoothed_weights(weights: Mapping[str, float], counts: Mapping[str, int],
                     strength: float | None = None) -> dict[str, float]:
    """Weights moved towards the repair counts, their total kept (see the module docstring)."""
    total = sum(weights.values())
    if total <= 0:
        raise ValueError("the weights must have a positive total")
    s = float(len(weights)) if strength is None else strength
    if s <= 0:
        raise ValueError("the prior strength must be positive")
    alpha = {k: s * w / total for k, w in weights.items()}
    mean = dirichlet_posterior_mean(alpha, counts)
    return {k: total * p for k, p in mean.items()}


def count_repairs(ruleset: Ruleset, repairs: Iterable[Repair]) -> tuple[Counter[str], tuple[Uncounted, ...]]:
    """Repairs per fault of this ruleset, and the repairs that could not be counted."""
    faults = {f.id for f in fault_list(ruleset)}
    components = {c.id for c in ruleset.components}
    counts: Counter[str] = Counter()
    uncounted: list[Uncounted] = []
    for repair in repairs:
        if repair.ruleset_id != ruleset.id:
            continue
        if repair.fault_id in faults:
            counts[repair.fault_id] += 1
        elif repair.fault_id == "none":
            uncounted.append(Uncounted(repair.source, repair.fault_id, "no fault found"))
        elif repair.fault_id.split(".", 1)[0] in components and "." in repair.fault_id:
            # a mode the ruleset switched off, or one its component type cannot have
            uncounted.append(Uncounted(repair.source, repair.fault_id, "not a fault mode of this ruleset"))
        else:
            uncounted.append(Uncounted(repair.source, repair.fault_id, "unknown fault"))
    return counts, tuple(uncounted)


def learn(ruleset: Ruleset, repairs: Iterable[Repair], strength: float | None = None) -> Learning:
    """New fault weights for ``ruleset`` from the repairs of it among ``repairs``."""
    old = {f.id: f.weight for f in fault_list(ruleset)}
    counts, uncounted = count_repairs(ruleset, repairs)
    s = float(len(old)) if strength is None else strength
    new = smoothed_weights(old, counts, s)
    log.info("%s: %d repairs counted, %d not, strength %g", ruleset.id, sum(counts.values()), len(uncounted), s)
    return Learning(ruleset.id, s, dict(counts), old, new, uncounted)
