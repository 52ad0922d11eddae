"""Fault injection: every fault mode of the ruleset format turned into changed part values.

The four generic modes apply to any part:

- ``open``: the part is removed from the netlist (not replaced by a large resistance);
- ``high_resistance``: a resistance in series with the part, log-uniform over the fault's range
  (default 0.5-50 ohm); for a lamp it is the holder's contacts, so a lamp measured out of its
  holder does not see it;
- ``short_to_ground`` / ``short_to_power``: a resistance, log-uniform over the range (default
  0.01-0.5 ohm), from the node ``at`` (default the part's last node, or its first when the last
  is the ground or the node it would be shorted to) to the ruleset's ground, or to the fault's ``to`` node
  where the format has it, else the ruleset's power node (default the first battery's positive).

Type-specific modes (``blown``, ``filament_open``, ``stuck_open``, ``stuck_closed``, ``seized``,
``worn``, ``discharged``, ``failing``, ``no_output``, ``low_output``, ``internal_fault``,
``stays_awake``) are applied by the part itself (``components.py``). A mode no part models
raises CircuitError.

Every hypothesis draws its magnitudes from its own random stream, keyed by the seed and its id,
so adding a fault to a ruleset leaves the draws of the others unchanged. In *nominal* mode each
magnitude is the middle of its range (the geometric mean for log-uniform ranges).
"""

from __future__ import annotations

import zlib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from assistant.circuit.components import Part, Values
from assistant.errors import CircuitError
from assistant.ruleset.defaults import HIGH_RESISTANCE_OHMS, SHORT_OHMS, Fault

GENERIC_MODES = frozenset({"open", "short_to_ground", "short_to_power", "high_resistance"})


class Sampler:
    """Draws for the S variants of one hypothesis; the middle of each range when nominal."""

    def __init__(self, rng: np.random.Generator, n: int, nominal: bool = False) -> None:
        self.rng, self.n, self.nominal = rng, n, nominal

    def uniform(self, low: float, high: float) -> np.ndarray:
        if self.nominal:
            return np.full(self.n, (low + high) / 2.0)
        return self.rng.uniform(low, high, self.n)

    def log_uniform(self, low: float, high: float) -> np.ndarray:
        if self.nominal:
            return np.full(self.n, float(np.sqrt(low * high)))
        return np.exp(self.rng.uniform(np.log(low), np.log(high), self.n))

    def choice(self, p: float) -> np.ndarray:
        if self.nominal:
            return np.full(self.n, p >= 0.5)
        return self.rng.random(self.n) < p


def stream(seed: int, key: str) -> np.random.Generator:
    """A random stream of its own for one hypothesis (or for the tolerances: key "")."""
    return np.random.default_rng([seed, zlib.crc32(key.encode("utf-8"))])


@dataclass(frozen=True, eq=False)
class Short:
    """A short injected by a fault: a resistance from node ``a`` to node ``b``."""

    owner: str  # the fault id
    component: str
    a: str
    b: str
    ohms: np.ndarray  # (B,)
    active: np.ndarray  # (B,) bool: in the variants of the hypotheses that hold this fault


def short_nodes(fault: Fault, part: Part, ground: str, power: str | None) -> tuple[str, str]:
    """The node a short is at and the node it goes to."""
    if fault.mode == "short_to_ground":
        target = ground
    else:
        if power is None and getattr(fault, "to", None) is None:
            raise CircuitError(f"fault '{fault.id}': the ruleset has no power node (no battery and no "
                               "'power:')", components=[part.id])
        target = str(getattr(fault, "to", None) or power)  # one of them is set: checked above
    # default: the last node, unless that is the target or the ground (a load's short to power
    # is at its feed, not from its ground terminal across the battery); any other node failing that
    candidates = [n for n in reversed(part.nodes) if n not in (target, ground)]
    candidates += [n for n in reversed(part.nodes) if n != target]
    at = fault.at or (candidates[0] if candidates else target)
    if at == target:
        raise CircuitError(f"fault '{fault.id}' would short node '{at}' to itself", components=[part.id])
    return at, target


def inject(
    parts: Mapping[str, Part],
    values: Mapping[str, Values],
    hypotheses: Sequence[tuple[str, Sequence[Fault]]],
    samples: int,
    *,
    seed: int,
    nominal: bool,
    ground: str,
    power: str | None,
) -> tuple[Short, ...]:
    """Apply every hypothesis's faults to its slice of ``values`` (in place); return the shorts.

    ``hypotheses`` are (id, faults) in batch order; hypothesis ``h`` owns variants
    ``h·samples .. (h+1)·samples - 1``.
    """
    batch = len(hypotheses) * samples
    shorts: dict[str, Short] = {}
    for h, (hyp_id, faults) in enumerate(hypotheses):
        sl = slice(h * samples, (h + 1) * samples)
        draw = Sampler(stream(seed, hyp_id), samples, nominal)
        for fault in faults:
            part = parts.get(fault.component)
            if part is None:
                raise CircuitError(f"fault '{fault.id}' names no component of the circuit")
            vals = values[part.id]
            if fault.mode == "open":
                vals["open"][sl] = True
            elif fault.mode == "high_resistance":
                vals["series"][sl] += draw.log_uniform(*(fault.range_ohms or HIGH_RESISTANCE_OHMS))
            elif fault.mode in ("short_to_ground", "short_to_power"):
                if fault.id not in shorts:
                    a, b = short_nodes(fault, part, ground, power)
                    shorts[fault.id] = Short(fault.id, part.id, a, b, np.ones(batch), np.zeros(batch, dtype=bool))
                short = shorts[fault.id]
                short.ohms[sl] = draw.log_uniform(*(fault.range_ohms or SHORT_OHMS))
                short.active[sl] = True
            else:
                part.fault(fault.mode, vals, sl, draw)
    return tuple(shorts.values())
