"""Beliefs: the probability of each hypothesis given the readings so far.

The predicted readings of a :class:`~assistant.predict.PredictionTable` are turned, once per
table, into an :class:`EvidenceModel`: for every test a matrix ``P[h, k]`` of the probability
that the meter shows outcome ``k`` if hypothesis ``h`` were true. Outcomes of a meter test are
display bins on one grid per test (the coarsest resolution the meter uses for it), plus the two
overload displays; outcomes of an observation are its answers.

``P`` is a mixture. Its main part is the predicted distribution: each Monte Carlo sample of the
display, spread by the meter's standard uncertainty (JCGM 100:2008, a rectangular bound divided
by sqrt(3)) and by a kernel bandwidth from the spread of the samples themselves (Silverman's
rule), integrated over each bin. Its small part (``outlier``, 1 % by default) is a flat floor:
a probe that slipped or a wrong pin, so that one bad reading makes no hypothesis impossible.

The posterior is ``log prior + log P[h, readings]``, normalised with log-sum-exp: never NaN,
never negative, always summing to one (de Kleer & Williams, "Diagnosing multiple faults",
Artificial Intelligence 32, 1987, for the sequential Bayes update over candidates). Meter
readings enter it sample by sample (:meth:`EvidenceModel.log_likelihood`): one Monte Carlo
sample is one vehicle, so readings that follow one part value are not counted twice. The
planner's outcome rows ``P[h, k]`` stay the per-test marginals.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field

import numpy as np
from scipy.special import logsumexp, ndtr

from assistant.errors import ReadingError
from assistant.predict import PredictionTable, TestInfo
from assistant.reading import Reading

DEFAULT_OUTLIER = 0.01
_DU = 0.002  # bin width on the asinh scale: 0.2 % of the reading, the finest display step near 0
_WINDOW_SIGMAS = 6.0  # a sample's mass beyond 6 standard deviations is below 1e-9
_MAX_BINS = 20000  # more than this and the bins widen
_CHUNK_CELLS = 1_000_000  # samples x window cells computed at once

# Displays beyond these are nothing a handheld meter or clamp can show (SI units).
DISPLAY_LIMITS = {"V": 1000.0, "A": 2000.0, "ohm": 1.0e9}


@dataclass(frozen=True, eq=False)
class TestOutcomes:
    """The outcome model of one test: ``probs[h, c]`` with the outlier floor mixed in.

    Observation: one column per answer. Meter test: the readings are binned on the scale
    ``u = asinh(value / scale)`` in steps of ``du``, which follows an auto-ranging meter (bins of
    about 0.2 % of the reading, and the finest display step near zero). Bins no hypothesis can
    show are merged into one "elsewhere" column (they carry only the floor, the same for every
    hypothesis, so merging them changes no posterior and no information gain). Columns: the
    used bins in order of value, then "elsewhere", then "-OL", then "OL".
    """

    index: int
    test: TestInfo
    probs: np.ndarray  # (H, C), rows sum to 1, outlier floor included
    model: np.ndarray  # (H, C), the predicted part alone (rows sum to 1, or 0 where nothing is known)
    outlier: float = DEFAULT_OUTLIER
    scale: float = 1.0
    du: float = _DU
    first_bin: int = 0
    n_bins: int = 0
    columns: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))  # bin -> column
    bins: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))  # column -> bin
    # each hypothesis' kernel bandwidth on the u scale, for the per-sample (joint) likelihood;
    # None where readings are taken one by one (observations, the noise-free model)
    bandwidth: np.ndarray | None = None
    # an observation whose answer follows the circuit: its answers are taken sample by sample
    follows_samples: bool = False
    log2probs: np.ndarray = field(init=False, repr=False)  # log2 of probs (-inf where 0)
    row_negentropy: np.ndarray = field(init=False, repr=False)  # sum_k P log2 P per hypothesis

    def __post_init__(self) -> None:
        with np.errstate(divide="ignore", invalid="ignore"):
            logs = np.log2(self.probs)
            object.__setattr__(self, "log2probs", logs)
            object.__setattr__(self, "row_negentropy",
                               np.where(self.probs > 0, self.probs * logs, 0.0).sum(axis=1))

    @property
    def is_observation(self) -> bool:
        return self.test.kind == "observation"

    @property
    def n_outcomes(self) -> int:
        return int(self.probs.shape[1])

    @property
    def n_values(self) -> int:
        """Columns that are single value bins (meter tests)."""
        return int(self.bins.size)

    @property
    def elementary(self) -> int:
        """How many elementary outcomes the floor spreads over."""
        return self.n_outcomes if self.is_observation else self.n_bins + 2

    def _bin(self, value: float) -> int:
        return int(math.floor(math.asinh(value / self.scale) / self.du + 0.5))

    def outcome_index(self, reading: Reading) -> int | None:
        """The column a reading falls in; None for a value outside the grid.

        Raises ReadingError when the reading does not fit the test (a value for an observation,
        an answer for a meter test, an answer the observation does not have, a value no meter
        shows).
        """
        if self.is_observation:
            if reading.outcome is None:
                raise ReadingError(f"test '{self.test.id}' is answered with one of "
                                   f"{', '.join(self.test.outcomes)}, not '{reading.text}'")
            if reading.outcome not in self.test.outcomes:
                raise ReadingError(f"'{reading.outcome}' is not an answer of test '{self.test.id}'; "
                                   f"answer one of {', '.join(self.test.outcomes)}")
            return self.test.outcomes.index(reading.outcome)
        if reading.outcome is not None:
            raise ReadingError(f"test '{self.test.id}' needs a meter reading in {self.test.unit}, "
                               f"not the answer '{reading.outcome}'")
        if reading.overload:
            return self.n_values + (1 if reading.text.strip().startswith("-") else 2)
        value = float(reading.value)  # type: ignore[arg-type]
        if not math.isfinite(value):
            raise ReadingError(f"'{reading.text}' is not a number a meter can show")
        limit = DISPLAY_LIMITS.get(self.test.unit)
        if limit is not None and abs(value) > limit:
            raise ReadingError(f"{reading.text} is beyond anything the meter can show for test "
                               f"'{self.test.id}' (at most {limit:g} {self.test.unit})")
        return self.bin_of(value)

    def likelihood(self, reading: Reading) -> np.ndarray:
        """P(reading | h) for every hypothesis, outlier floor included; never zero."""
        k = self.outcome_index(reading)
        if k is None:
            return np.full(self.probs.shape[0], self.outlier / self.elementary)
        return self.probs[:, k]

    def explained(self, reading: Reading) -> np.ndarray:
        """Which hypotheses explain the reading better than the outlier floor does (bool, (H,))."""
        k = self.outcome_index(reading)
        if k is None:
            return np.zeros(self.probs.shape[0], dtype=bool)
        return (1.0 - self.outlier) * self.model[:, k] > self.outlier / self.elementary

    def bin_of(self, value: float) -> int | None:
        """Column of an SI value (None outside the grid); ±inf go to the overload columns."""
        if self.is_observation:
            raise ValueError("observations have no value bins")
        if math.isinf(value):
            return self.n_values + (2 if value > 0 else 1)
        k = self._bin(value) - self.first_bin
        return int(self.columns[k]) if 0 <= k < self.n_bins else None

    def bounds(self, column: int) -> tuple[float, float]:
        """The SI values a value column spans."""
        k = int(self.bins[column])
        return (self.scale * math.sinh((k - 0.5) * self.du), self.scale * math.sinh((k + 0.5) * self.du))

    def width(self, column: int) -> float:
        lo, hi = self.bounds(column)
        return hi - lo

    def label(self, column: int) -> str:
        """How outcome ``column`` reads on the meter or as an answer."""
        if self.is_observation:
            return self.test.outcomes[column]
        if column == self.n_values:
            return "elsewhere"
        if column == self.n_values + 1:
            return "-OL"
        if column == self.n_values + 2:
            return "OL"
        return format_value(self.centre(column), self.test.unit, self.width(column))

    def centre(self, column: int) -> float:
        """The SI value at the centre of a column (±inf for overloads, NaN for "elsewhere")."""
        if column == self.n_values:
            return math.nan
        if column == self.n_values + 1:
            return -math.inf
        if column == self.n_values + 2:
            return math.inf
        return self.scale * math.sinh(int(self.bins[column]) * self.du)


def format_value(value: float, unit: str, step: float | None = None) -> str:
    """A value as a meter would show it: '12.43 V', '0.7 ohm', 'OL'."""
    if math.isinf(value):
        return "OL" if value > 0 else "-OL"
    digits = 0 if not step or step >= 1 else min(6, max(0, -int(math.floor(math.log10(step) + 1e-9))))
    text = f"{value:.{digits}f}"
    if text.startswith("-") and float(text) == 0.0:
        text = text[1:]
    return f"{text} {unit}".strip()


@dataclass(frozen=True, eq=False)
class EvidenceModel:
    """The outcome models of every test of one prediction table, built once and shared."""

    table: PredictionTable
    tests: tuple[TestOutcomes, ...]
    outlier: float

    @property
    def n_hypotheses(self) -> int:
        return len(self.table.hypotheses)

    def sample_likelihood(self, t: int, reading: Reading, widen: float = 1.0) -> np.ndarray | None:
        """P(reading | h, sample s), shape (H, S), outlier floor included.

        Sample ``s`` is one simulated vehicle: one set of part values and one fault magnitude.
        Its display is spread by the meter's uncertainty and the kernel bandwidth as in
        :func:`build_model`, so that the mean over the samples is the test's ``probs`` column.
        An observation that follows the circuit gives its answers' likelihoods sample by sample
        (:meth:`_seen_likelihood`). None where the reading tells every sample of a hypothesis the
        same (the other observations, the noise-free model, a value off the grid, the
        "elsewhere" column).
        """
        o = self.tests[t]
        if o.follows_samples:
            return self._seen_likelihood(t, reading)
        if not self._per_sample(t, reading):
            return None
        k = o.outcome_index(reading)
        assert k is not None and o.bandwidth is not None  # what _per_sample checked
        x = np.asarray(self.table.samples[:, t, :], dtype=float)
        if k == o.n_values + 1:
            mass = np.isneginf(x).astype(float)
        elif k == o.n_values + 2:
            mass = np.isposinf(x).astype(float)
        else:
            finite = np.isfinite(x)
            xs = np.where(finite, x, 0.0)
            u = np.arcsinh(xs / o.scale)
            sig = np.nan_to_num(np.asarray(self.table.sigma[:, t, :], dtype=float), nan=0.0, posinf=0.0)
            spread = np.sqrt((sig / np.sqrt(xs ** 2 + o.scale ** 2)) ** 2 + (widen * o.bandwidth[:, None]) ** 2)
            b = int(o.bins[k])
            lower, upper = (b - 0.5) * o.du, (b + 0.5) * o.du
            safe = np.where(spread > 0, spread, 1.0)
            mass = np.where(spread > 0, ndtr((upper - u) / safe) - ndtr((lower - u) / safe),
                            ((lower <= u) & (u < upper)).astype(float))
            mass = np.where(finite, mass, 0.0)
        # a sample with no prediction (NaN) says what the hypothesis says on the whole
        mass = np.where(np.isnan(x), o.model[:, k][:, None], mass)
        known = o.model.sum(axis=1) > 0
        floor = o.probs[:, k] - (1.0 - o.outlier) * o.model[:, k]
        like = (1.0 - o.outlier) * mass + floor[:, None]
        like[~known] = o.probs[~known, k][:, None]
        return like

    def _seen_likelihood(self, t: int, reading: Reading) -> np.ndarray:
        """P(answer | h, sample s) of an observation that follows the circuit: 1 - misjudged
        where the sample shows that answer, misjudged spread over the other answers elsewhere,
        the outlier floor mixed in as in :func:`build_model`."""
        o = self.tests[t]
        k = o.outcome_index(reading)
        assert k is not None and o.test.misjudged is not None  # outcome_index raised if not an answer
        n = o.n_outcomes
        m = o.test.misjudged
        shown = np.asarray(self.table.samples[:, t, :]) == k
        return (1.0 - o.outlier) * np.where(shown, 1.0 - m, m / (n - 1)) + o.outlier / n

    def _per_sample(self, t: int, reading: Reading) -> bool:
        """Whether a reading tells one sample of a hypothesis from another (see sample_likelihood)."""
        o = self.tests[t]
        if o.bandwidth is None:
            return False
        k = o.outcome_index(reading)
        return k is not None and k != o.n_values

    def split_log_likelihood(self, answered: Iterable[tuple[int, Reading]]
                             ) -> tuple[np.ndarray, np.ndarray | None]:
        """(sum of log P(reading | h) over the readings taken one by one, shape (H,); sum of
        log P(reading | h, s) over the readings taken sample by sample, shape (H, S), or None)."""
        answered = list(answered)
        single = np.zeros(self.n_hypotheses)
        joint = None
        widen = joint_widening(sum(self._per_sample(t, r) for t, r in answered), self.table.samples.shape[2])
        with np.errstate(divide="ignore"):  # a noise-free model rules out with log 0 = -inf
            for t, reading in answered:
                per_sample = self.sample_likelihood(t, reading, widen)
                if per_sample is None:
                    single += np.log(self.tests[t].likelihood(reading))
                else:
                    logs = np.log(per_sample)
                    joint = logs if joint is None else joint + logs
        return single, joint

    def log_likelihood(self, answered: Iterable[tuple[int, Reading]]) -> np.ndarray:
        """log P(readings | h), shape (H,).

        Readings of meter tests are taken jointly, sample by sample: two readings that both
        follow one part value (the cranking current through two cables, the battery's charge at
        two fuse slots) count as the one quantity they measure, not as two independent pieces
        of evidence. P(readings | h) is the mean over the hypothesis' Monte Carlo samples of the
        product of the readings' likelihoods under each sample (the particle estimate of the
        marginal likelihood: Doucet, de Freitas & Gordon, eds., "Sequential Monte Carlo Methods
        in Practice", Springer 2001). Observations whose answers follow the circuit (``seen``)
        are taken sample by sample too; the others, whose answers do not depend on the part
        values here, multiply in as they are.
        """
        single, joint = self.split_log_likelihood(answered)
        if joint is None:
            return single
        return single + logsumexp(joint, axis=1) - math.log(joint.shape[1])


def joint_widening(d: int, n: int) -> float:
    """How much wider each reading's kernel is when ``d`` readings are taken jointly over ``n``
    samples: the normal-reference bandwidth of a d-dimensional product kernel,
    (4 / ((d + 2) n))^(1 / (d + 4)), over the one-dimensional one (Silverman, "Density Estimation
    for Statistics and Data Analysis", Chapman & Hall 1986, section 4.3.2). 1 for one reading."""
    if d <= 1 or n < 2:
        return 1.0
    return float((4.0 / ((d + 2) * n)) ** (1.0 / (d + 4)) / (4.0 / (3 * n)) ** 0.2)


def build_model(table: PredictionTable, *, outlier: float = DEFAULT_OUTLIER,
                noise_free: bool = False) -> EvidenceModel:
    """The evidence model of a table. ``noise_free``: each hypothesis shows its median reading
    (its most likely answer for observations), no meter noise and no outlier floor."""
    if not 0.0 <= outlier < 1.0:
        raise ValueError("outlier must be in [0, 1)")
    eps = 0.0 if noise_free else outlier
    tests = []
    for t, info in enumerate(table.tests):
        if info.kind == "observation":
            tests.append(_observation_outcomes(table, t, info, eps, noise_free))
        else:
            tests.append(_meter_outcomes(table, t, info, eps, noise_free))
    return EvidenceModel(table, tuple(tests), eps)


def _mix(model: np.ndarray, floor: np.ndarray, eps: float) -> np.ndarray:
    known = model.sum(axis=1, keepdims=True) > 0
    main = np.where(known, model, floor[None, :])
    return (1.0 - eps) * main + eps * floor[None, :]


def _observation_outcomes(table: PredictionTable, t: int, info: TestInfo, eps: float,
                          noise_free: bool) -> TestOutcomes:
    h = len(table.hypotheses)
    raw = table.observations.get(t)
    k = max(1, len(info.outcomes))
    model = np.full((h, k), 1.0 / k) if raw is None else np.clip(np.asarray(raw, dtype=float), 0.0, None)
    sums = model.sum(axis=1, keepdims=True)
    model = np.where(sums > 0, model / np.where(sums > 0, sums, 1.0), 1.0 / k)
    if noise_free:
        model = np.eye(k)[np.argmax(model, axis=1)]
    follows = info.misjudged is not None and not noise_free and bool(np.isfinite(table.samples[:, t, :]).all())
    return TestOutcomes(t, info, _mix(model, np.full(k, 1.0 / k), eps), model, outlier=eps,
                        follows_samples=follows)


def _bandwidth(x: np.ndarray) -> float:
    """Silverman's rule-of-thumb kernel bandwidth of a sample (0 for fewer than two values)."""
    if x.size < 2:
        return 0.0
    sd = float(np.std(x, ddof=1))
    q75, q25 = np.percentile(x, [75, 25])
    spread = min(sd, float(q75 - q25) / 1.34) if q75 > q25 else sd
    return float(0.9 * spread * x.size ** -0.2)


def _bandwidths(u: np.ndarray, finite: np.ndarray) -> np.ndarray:
    """Silverman's bandwidth of each row's finite values (0 for rows with fewer than two)."""
    count = finite.sum(axis=1)
    bw = np.zeros(u.shape[0])
    rows = count >= 2
    if rows.any():
        x = u[rows]
        sd = np.nanstd(x, axis=1, ddof=1)
        full = bool(finite[rows].all())  # np.percentile is far faster than nanpercentile
        q75, q25 = (np.percentile if full else np.nanpercentile)(x, [75, 25], axis=1)
        iqr = (q75 - q25) / 1.34
        spread = np.where(iqr > 0, np.minimum(sd, iqr), sd)
        bw[rows] = 0.9 * spread * count[rows] ** -0.2
    return bw


def _spread_samples(acc: np.ndarray, uv: np.ndarray, sv: np.ndarray, rows: np.ndarray,
                    offsets: np.ndarray, du: float, first: int, n_bins: int, width: int) -> None:
    """Add each sample's display distribution (normal on the u scale, integrated over the bins)
    into ``acc`` (flattened (H, width))."""
    bins = np.floor(uv / du + 0.5).astype(np.int64)[:, None] - first + offsets[None, :]  # (N, W)
    lower = (first + bins - 0.5) * du
    upper = lower + du
    spread = sv > 0
    safe = np.where(spread, sv, 1.0)[:, None]
    mass = ndtr((upper - uv[:, None]) / safe) - ndtr((lower - uv[:, None]) / safe)
    if not spread.all():  # exact values (noise-free tables): all the mass in their own bin
        point = ((lower <= uv[:, None]) & (uv[:, None] < upper)).astype(float)
        mass = np.where(spread[:, None], mass, point)
    mass = np.where((bins >= 0) & (bins < n_bins), mass, 0.0)
    totals = mass.sum(axis=1, keepdims=True)
    mass = mass / np.where(totals > 0, totals, 1.0)
    flat = rows[:, None] * width + np.clip(bins, 0, n_bins - 1)
    acc += np.bincount(flat.ravel(), weights=mass.ravel(), minlength=acc.size)


def _meter_outcomes(table: PredictionTable, t: int, info: TestInfo, eps: float,
                    noise_free: bool) -> TestOutcomes:
    x = np.asarray(table.samples[:, t, :], dtype=float)
    sig = np.nan_to_num(np.asarray(table.sigma[:, t, :], dtype=float), nan=0.0, posinf=0.0)
    res = np.asarray(table.resolution[:, t, :], dtype=float)
    n_h, n_s = x.shape
    finite = np.isfinite(x)
    good_res = res[np.isfinite(res) & (res > 0)]
    du = _DU
    scale = (float(good_res.min()) if good_res.size else 1e-3) / du
    u = np.where(finite, np.arcsinh(np.where(finite, x, 0.0) / scale), np.nan)

    if noise_free:
        centre = np.full(n_h, np.nan)
        for h in range(n_h):
            row = x[h]
            over = int(np.isposinf(row).sum()), int(np.isneginf(row).sum())
            fin = u[h][finite[h]]
            if fin.size > max(over):
                centre[h] = float(np.median(fin))
            elif max(over) > 0:
                centre[h] = math.inf if over[0] >= over[1] else -math.inf
        spread = np.zeros_like(x)
        points = np.isfinite(centre)
        lo = float(centre[points].min()) if points.any() else 0.0
        hi = float(centre[points].max()) if points.any() else 0.0
    else:
        centre = None
        # each sample's spread on the u scale: the meter's uncertainty (delta method) and the
        # kernel bandwidth of its hypothesis' samples
        bw = _bandwidths(u, finite)
        sig_u = sig / np.sqrt(np.where(finite, x, 0.0) ** 2 + scale ** 2)
        spread = np.sqrt(sig_u ** 2 + bw[:, None] ** 2)
        lo = float((u - _WINDOW_SIGMAS * spread)[finite].min()) if finite.any() else 0.0
        hi = float((u + _WINDOW_SIGMAS * spread)[finite].max()) if finite.any() else 0.0
    if (hi - lo) / du > _MAX_BINS:
        du *= math.ceil((hi - lo) / du / _MAX_BINS)
    first = int(math.floor(lo / du + 0.5))
    n_bins = int(math.floor(hi / du + 0.5)) - first + 1
    width = n_bins + 2
    model = np.zeros((n_h, width))

    if centre is not None:
        for h, c in enumerate(centre):
            if math.isnan(c):
                continue
            if math.isinf(c):
                model[h, n_bins + (1 if c > 0 else 0)] = 1.0
            else:
                model[h, int(math.floor(c / du + 0.5)) - first] = 1.0
    else:
        model[:, n_bins] = np.isneginf(x).mean(axis=1)
        model[:, n_bins + 1] = np.isposinf(x).mean(axis=1)
        acc = np.zeros(n_h * width)
        # hypotheses grouped by how many bins their samples spread over, so that narrow ones
        # are not computed over the widest window
        half = np.ceil(_WINDOW_SIGMAS * np.where(finite, spread, 0.0).max(axis=1) / du).astype(np.int64) + 1
        bucket = np.ceil(np.log2(half)).astype(np.int64)
        for b in np.unique(bucket):
            hs, ss = np.nonzero(finite & (bucket == b)[:, None])
            if not hs.size:
                continue
            offsets = np.arange(-int(2 ** b), int(2 ** b) + 1)
            chunk = max(1, _CHUNK_CELLS // offsets.size)
            for start in range(0, hs.size, chunk):
                h_c, s_c = hs[start:start + chunk], ss[start:start + chunk]
                _spread_samples(acc, u[h_c, s_c], spread[h_c, s_c], h_c, offsets, du, first, n_bins, width)
        model += acc.reshape(n_h, width) / n_s
        sums = model.sum(axis=1, keepdims=True)
        model = np.where(sums > 0, model / np.where(sums > 0, sums, 1.0), 0.0)

    # merge the bins no hypothesis shows into one column
    used = np.nonzero(model[:, :n_bins].sum(axis=0) > 0)[0]
    columns = np.full(n_bins, used.size, dtype=np.int64)
    columns[used] = np.arange(used.size)
    compact = np.concatenate([model[:, used], np.zeros((n_h, 1)), model[:, n_bins:]], axis=1)
    floor = np.concatenate([np.ones(used.size), [n_bins - used.size], [1.0, 1.0]]) / width
    return TestOutcomes(t, info, _mix(compact, floor, eps), compact, eps, scale, du, first, n_bins,
                        columns, used + first, None if noise_free else bw)


# --------------------------------------------------------------------------- the posterior


def normalise_log(log_weights: np.ndarray) -> np.ndarray:
    """A probability vector from log weights (``-inf`` allowed); ValueError if all are ``-inf``."""
    w = np.asarray(log_weights, dtype=float)
    if w.size == 0 or not np.isfinite(w).any() or np.isnan(w).any():
        raise ValueError("no hypothesis has a positive weight")
    p = np.exp(w - logsumexp(w))
    p = np.clip(p, 0.0, None)
    return np.asarray(p / p.sum())


def posterior(log_prior: np.ndarray, model: EvidenceModel,
              answered: Sequence[tuple[int, Reading]]) -> np.ndarray:
    """P(h | readings) from log prior weights (unnormalised, ``-inf`` = ruled out)."""
    return normalise_log(np.asarray(log_prior, dtype=float) + model.log_likelihood(answered))


def entropy_bits(p: np.ndarray) -> float:
    """Shannon entropy of a distribution, in bits."""
    q = np.asarray(p, dtype=float)
    q = q[q > 0]
    return float(-(q * np.log2(q)).sum())
