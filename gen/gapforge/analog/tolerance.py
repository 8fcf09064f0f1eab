"""Tolerance analysis of the reference network: worst-case corners, RSS, seeded Monte Carlo.

Methods (ECSS-Q-HB-30-01A, worst case analysis; JCGM 100:2008 (GUM) 5.1.2 for the
root-sum-square of sensitivity x standard uncertainty, 4.3.7 for a uniform band's a/sqrt(3);
JCGM 101:2008 for Monte Carlo propagation):

- worst case: every min/typ/max combination of the parameters that vary (both channels' parts
  independent, supply, temperature and the pair's inverter shared; the band ends only of the
  parameters the delay is monotonic in), then checked against the same search on a finer grid
  (CHECK_LEVELS equal steps of every parameter that can act both ways): extreme-value corners
  can miss the extreme of a non-monotonic response, so the range is widened to any value of the
  finer grid outside it and the widening is reported. (A Monte Carlo draw rarely lands where
  that extreme lies: it needs every monotonic parameter at its end at the same time. The
  Monte Carlo below is the statistical view, and `analog` flags a sample beyond the worst case.)
- RSS: central-difference sensitivities at the typical point;
- Monte Carlo: uniform over each band, or a split normal with the band ends at k sigma; chunked,
  with exact order statistics from a histogram pass so 10M samples need little memory.

Every parameter is handled as a position: 0 = its min, 0.5 = typ, 1 = max (see analog.values_at).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from fractions import Fraction
from typing import TYPE_CHECKING

import numpy as np

from gapforge.analog.corners import (
    CHANNEL_PARAMS,
    DELAY_PARAMS,
    SHARED_PARAMS,
    channel_edge_delays,
    pair_dead_times,
    pair_roles,
    parameter_bands,
    spread_parameters,
    values_at,
)
from gapforge.analog.network import (
    EDGES,
    PAIR_KEYS,
    Band,
    EdgeRange,
    ReferenceNetwork,
    edge_range,
)
from gapforge.analog.statistics import QUANTITIES, Stats, stats_direct, stats_streaming
from gapforge.base.records import record

if TYPE_CHECKING:  # numpy.typing only for the checker: a build does not import it
    import numpy.typing as npt

    FloatArray = npt.NDArray[np.float64]
DEFAULT_SAMPLES = 100_000
CHUNK = 250_000
_KEEP_ALL_LIMIT = 2_000_000  # up to this many samples the results are kept and sorted directly
_LEVELS = (0.0, 0.5, 1.0)
# These take only their band ends in the corner search: the node delay is monotonic in each
# at every value of the others (Rout, C and the strays; R without a diode across it; the
# tempcos act through R and C linearly, with the sign of T - 25 C). Thresholds, the knee,
# supply and temperature can act both ways and take min, typ and max.
MONOTONE_PARAMS = frozenset({"rout", "r", "r_tc", "c", "c_tc", "cin", "cstray"})
# Of those, the node delay grows with these (more node capacitance is more charge to move; in
# the charge integral a larger Rout lowers the current at every node voltage and raises the
# distance still to go, and so does a larger R without a diode), so the smallest delay of a
# corner set has them all at their band's low end and the largest at its high end: the corner
# search evaluates those two points of them instead of all 2^5 (the tempcos keep both ends).
# tests/test_tolerance.py holds the result equal to the full grid.
INCREASING_PARAMS = ("rout", "r", "c", "cin", "cstray")
# Except R where a diode is across it: the junction's charge and leakage currents make the node
# delay fall as R grows in places (review of issue 22, seeded sweeps: the resistor edge where
# the junction's coupled step nearly reaches the threshold, by tens of % per % of R; the
# bypassed edge with a junction capacitance comparable to C, whose maximum one end per bound
# put 0.4 % (16 ps) short, on the side that shortens the minimum dead time). There R takes
# both ends for each bound; Rout and the capacitances were monotonic in every sweep.
BOTH_ENDS_WITH_DIODE = ("r",)
_ENDS = (0.0, 1.0)
# The worst case's check: the corner search again with this many equal steps of each parameter
# that can act both ways (quarter steps; see `worst_case`).
CHECK_LEVELS = 5


# --------------------------------------------------------------------------------------------
# Evaluation of the pair for arrays of positions


def evaluate(
    net: ReferenceNetwork,
    shared: Mapping[str, FloatArray],
    high: Mapping[str, FloatArray],
    low: Mapping[str, FloatArray],
    *,
    textbook: bool = False,
) -> dict[str, FloatArray]:
    """Node delays of the high channel and the pair's dead times for positions (0/0.5/1)."""
    vh = values_at(net, {**shared, **high})
    vl = values_at(net, {**shared, **low})
    dh = channel_edge_delays(net, vh, textbook=textbook)
    dl = channel_edge_delays(net, vl, textbook=textbook)
    pair = pair_dead_times(net, dh, dl, vh["pair_inverter_delay"])
    result = {"node_rising": dh["node_rising"], "node_falling": dh["node_falling"], **pair}
    shape = np.broadcast_shapes(*(np.shape(v) for v in (*shared.values(), *high.values(),
                                                         *low.values())))
    return {k: np.broadcast_to(v, shape) for k, v in result.items()}


def typical(net: ReferenceNetwork) -> dict[str, float]:
    half = {"vdd": np.asarray([0.5])}
    result = evaluate(net, half, {}, {})
    return {k: float(v[0]) for k, v in result.items()}


def typical_textbook(net: ReferenceNetwork) -> dict[str, float]:
    """The typical values by the textbook closed forms (for display beside the model)."""
    half = {"vdd": np.asarray([0.5])}
    result = evaluate(net, half, {}, {}, textbook=True)
    return {k: float(v[0]) for k, v in result.items()}


# --------------------------------------------------------------------------------------------
# Worst case


@record
class WorstCase:
    edges: dict[str, EdgeRange]  # node delays (ideal step to threshold), one channel
    channel: dict[str, EdgeRange]  # input edge to output edge, one channel
    pair: dict[str, EdgeRange]  # to_high / to_low
    floats: dict[str, tuple[float, float, float]]  # the same, unrounded, for display
    widened: tuple[str, ...]  # quantities whose corners the finer grid widened
    check_levels: int  # levels of the finer grid per parameter that can act both ways (0: none)
    check_points: int  # parameter points of one channel the check evaluated


def check_levels_at(count: int) -> tuple[float, ...]:
    """Positions 0..1 in `count` equal steps: an odd count holds min, typ and max among them."""
    if count < 3 or count % 2 == 0:
        raise ValueError("the check needs an odd number of levels, at least 3")
    return tuple(k / (count - 1) for k in range(count))


def _monotone(net: ReferenceNetwork) -> tuple[frozenset[str], tuple[str, ...]]:
    """(the parameters searched at their band ends only, those of them taken at one end per
    bound) for this network: R takes both ends for each bound where a diode is across it."""
    if net.bypass == "none":
        return MONOTONE_PARAMS, INCREASING_PARAMS
    return MONOTONE_PARAMS, tuple(n for n in INCREASING_PARAMS if n not in BOTH_ENDS_WITH_DIODE)


def _grid(names: list[str], both_ways: Sequence[float] = _LEVELS,
          monotone: frozenset[str] = MONOTONE_PARAMS) -> dict[str, FloatArray]:
    if not names:
        return {}
    levels = [np.asarray(_ENDS if n in monotone else both_ways) for n in names]
    mesh = np.meshgrid(*levels, indexing="ij")
    return {name: m.ravel() for name, m in zip(names, mesh, strict=True)}


def corner_extremes(
    net: ReferenceNetwork, both_ways: Sequence[float] = _LEVELS
) -> dict[str, tuple[float, float, float]]:
    """min/typ/max over the corners (no check).

    Every combination of the varying parameters' levels: `both_ways` (min/typ/max unless told)
    for the ones that can act both ways, only the band ends for the others (MONOTONE_PARAMS).
    """
    return corner_extremes_for_parts(net, [(net.r, net.c)], both_ways)[0]


def _part_values(
    net: ReferenceNetwork,
    positions: Mapping[str, FloatArray],
    parts: Sequence[tuple[Fraction, Fraction]],
) -> dict[str, FloatArray]:
    """`values_at` for every (R, C) of `parts` at once: a leading axis, one row per pair.

    R and C take each pair's own band (the network's tolerances around the pair's values),
    computed as `values_at` computes them for `replace(net, r=r, c=c)` (`r_band`, `c_band`), so
    a row equals that network's values exactly.
    """
    values = dict(values_at(net, positions))
    shape = np.broadcast_shapes(*(np.shape(v) for v in values.values()))
    lead = (len(parts),) + (1,) * len(shape)
    for name, bands in (
        ("r", [Band(r * (1 - net.r_tol), r, r * (1 + net.r_tol)).floats() for r, _ in parts]),
        ("c", [Band(c * (1 - net.c_tol), c, c * (1 + net.c_tol)).floats() for _, c in parts]),
    ):
        table = np.asarray(bands, dtype=float)
        lo, typ, hi = (table[:, k].reshape(lead) for k in range(3))
        pos = positions.get(name)
        if pos is None or bool(np.all(lo == hi)):
            values[name] = typ
        else:
            values[name] = _through_arrays(np.asarray(pos, dtype=float)[None], lo, typ, hi)
    full = (len(parts), *shape)
    return {k: np.broadcast_to(v, full) for k, v in values.items()}


def _through_arrays(position: FloatArray, lo: FloatArray, typ: FloatArray,
                    hi: FloatArray) -> FloatArray:
    """`analog._through` with per-row band ends (the same arithmetic, element by element)."""
    result: FloatArray = np.where(
        position <= 0.5,
        lo + (typ - lo) * (position * 2.0),
        typ + (hi - typ) * (position * 2.0 - 1.0),
    )
    return result


def typical_for_parts(
    net: ReferenceNetwork, parts: Sequence[tuple[Fraction, Fraction]]
) -> dict[str, FloatArray]:
    """`typical(replace(net, r=r, c=c))` for every (R, C) of `parts`, as arrays, in one go."""
    values = _part_values(net, {"vdd": np.asarray([0.5])}, parts)
    delays = channel_edge_delays(net, values)
    pair = pair_dead_times(net, delays, delays, values["pair_inverter_delay"])
    result = {"node_rising": delays["node_rising"], "node_falling": delays["node_falling"], **pair}
    return {k: np.broadcast_to(v, values["vdd"].shape)[:, 0] for k, v in result.items()}


def corner_extremes_for_parts(
    net: ReferenceNetwork,
    parts: Sequence[tuple[Fraction, Fraction]],
    both_ways: Sequence[float] = _LEVELS,
) -> list[dict[str, tuple[float, float, float]]]:
    """`corner_extremes(replace(net, r=r, c=c))` for every (R, C) of `parts`, in one evaluation.

    One evaluation of all pairs' corners costs little more than one pair's (the charge integral
    is vectorised), which lets `preferred.suggest` check every candidate's worst case.
    """
    grids = _node_grids(net, parts, both_ways)
    return _extremes(net, parts, grids, typical_for_parts(net, parts), None)


def corners_and_check(
    net: ReferenceNetwork, check: Sequence[float]
) -> tuple[dict[str, tuple[float, float, float]], dict[str, tuple[float, float, float]]]:
    """(the corners, the finer grid `check`) from one evaluation of the finer grid: an odd level
    count holds min, typ and max, so the corners are a subset of its points."""
    parts = [(net.r, net.c)]
    grids = _node_grids(net, parts, check)
    typ = typical_for_parts(net, parts)
    return (_extremes(net, parts, grids, typ, _LEVELS)[0],
            _extremes(net, parts, grids, typ, None)[0])


@record
class _Grid:
    """One input edge's node delays over the corner grid: `node` is (parts, shared, 2 x half),
    the parameters the delay grows with low in the first half and high in the second; the
    positions of the parameters that can act both ways, per shared row and per local column."""

    node: FloatArray
    shared: FloatArray  # (shared, names): positions of supply and temperature
    local: FloatArray  # (half, names): positions of the local parameters


def _local_names(edge: str, spread: set[str], increasing: tuple[str, ...]) -> list[str]:
    """The channel parameters one input edge's grid spans: the other edge's threshold, the
    additive delays and the ones taken at one end per bound stay out."""
    skip = {"vt_minus" if edge == "rising" else "vt_plus", *DELAY_PARAMS, *increasing}
    return [n for n in CHANNEL_PARAMS if n in spread and n not in skip]


def _node_grids(
    net: ReferenceNetwork, parts: Sequence[tuple[Fraction, Fraction]], both_ways: Sequence[float]
) -> dict[str, _Grid]:
    spread = set(spread_parameters(net))  # R and C spread by tolerance, whatever their value
    monotone, increasing = _monotone(net)
    count = len(parts)
    shared_names: list[str] = [n for n in ("vdd", "temp") if n in spread]
    shared = _grid(shared_names, both_ways)
    n_shared = len(next(iter(shared.values()))) if shared else 1
    shared_table = (np.stack(list(shared.values()), axis=1) if shared
                    else np.zeros((1, 0)))
    grids: dict[str, _Grid] = {}
    for edge in EDGES:
        local_names = _local_names(edge, spread, increasing)
        local = _grid(local_names, both_ways, monotone)
        half = len(next(iter(local.values()))) if local else 1
        n_local = 2 * half  # the grid with INCREASING_PARAMS low, then the same with them high
        positions: dict[str, FloatArray] = {}
        for name, arr in shared.items():
            positions[name] = np.repeat(arr, n_local).reshape(n_shared, n_local)
        for name, arr in local.items():
            positions[name] = np.tile(arr, 2 * n_shared).reshape(n_shared, n_local)
        ends = np.repeat(np.asarray(_ENDS), half)
        for name in increasing:
            if name in spread:
                positions[name] = np.tile(ends, n_shared).reshape(n_shared, n_local)
        if not positions:
            positions = {"vdd": np.full((1, 1), 0.5)}
        values = _part_values(net, positions, parts)
        node = channel_edge_delays(net, values, (edge,))["node_" + edge]
        local_table = np.stack(list(local.values()), axis=1) if local else np.zeros((1, 0))
        grids[edge] = _Grid(np.broadcast_to(node, (count, n_shared, n_local)), shared_table,
                            local_table)
    return grids


def _extremes(
    net: ReferenceNetwork,
    parts: Sequence[tuple[Fraction, Fraction]],
    grids: Mapping[str, _Grid],
    typ: Mapping[str, FloatArray],
    keep: Sequence[float] | None,
) -> list[dict[str, tuple[float, float, float]]]:
    """min/typ/max per quantity over the grid's points, or over those whose positions all lie
    on the levels `keep` (None: every point)."""
    bands = parameter_bands(net)
    fixed_lo = sum(bands[n][0] for n in DELAY_PARAMS)
    fixed_hi = sum(bands[n][2] for n in DELAY_PARAMS)
    node_lo: dict[str, FloatArray] = {}
    node_hi: dict[str, FloatArray] = {}
    for edge, g in grids.items():
        half = g.node.shape[2] // 2
        rows, cols = np.arange(g.node.shape[1]), np.arange(half)
        if keep is not None:
            rows = np.flatnonzero(np.isin(g.shared, keep).all(axis=1))
            cols = np.flatnonzero(np.isin(g.local, keep).all(axis=1))
        node = g.node[:, rows]
        node_lo[edge] = node[:, :, cols].min(axis=2)
        node_hi[edge] = node[:, :, half + cols].max(axis=2)
    inv_lo, _, inv_hi = bands["pair_inverter_delay"]
    fixed_typ = sum(bands[n][1] for n in DELAY_PARAMS)
    results: list[dict[str, tuple[float, float, float]]] = [{} for _ in parts]
    for edge in EDGES:
        lo_e, hi_e = node_lo[edge].min(axis=1), node_hi[edge].max(axis=1)
        for k, result in enumerate(results):
            t = float(typ["node_" + edge][k])
            result["node_" + edge] = (float(lo_e[k]), t, float(hi_e[k]))
            result[edge] = (float(lo_e[k]) + fixed_lo, t + fixed_typ, float(hi_e[k]) + fixed_hi)
    roles = pair_roles(net)
    for key in PAIR_KEYS:
        hi_edge, lo_edge = roles[key]
        if key == "to_high":
            # high turns on (delayed), low turns off: on - (inverter + off)
            lo_val = node_lo[hi_edge] + fixed_lo - (inv_hi + node_hi[lo_edge] + fixed_hi)
            hi_val = node_hi[hi_edge] + fixed_hi - (inv_lo + node_lo[lo_edge] + fixed_lo)
        else:
            # low turns on (inverter + delayed), high turns off
            lo_val = inv_lo + node_lo[lo_edge] + fixed_lo - (node_hi[hi_edge] + fixed_hi)
            hi_val = inv_hi + node_hi[lo_edge] + fixed_hi - (node_lo[hi_edge] + fixed_lo)
        lows, highs = lo_val.min(axis=1), hi_val.max(axis=1)
        for k, result in enumerate(results):
            result[key] = (float(lows[k]), float(typ[key][k]), float(highs[k]))
    return results


def grid_points(net: ReferenceNetwork, both_ways: Sequence[float] = _LEVELS) -> int:
    """How many parameter points of one channel `corner_extremes` evaluates with these levels
    (both input edges, and the typical point)."""
    spread = set(spread_parameters(net))
    monotone, increasing = _monotone(net)
    shared = math.prod(len(both_ways) for n in ("vdd", "temp") if n in spread)
    total = 1
    for edge in EDGES:
        local = math.prod(len(_ENDS if n in monotone else both_ways)
                          for n in _local_names(edge, spread, increasing))
        total += shared * local * 2
    return total


def worst_case(net: ReferenceNetwork, check_levels: int = CHECK_LEVELS) -> WorstCase:
    """Corners, checked (and widened if need be) against a finer grid of the same corners.

    The corners take min, typ and max of every parameter that can act both ways (supply,
    temperature, the thresholds); extreme-value corners can miss the extreme of a response that
    is not monotonic in one of them (ECSS-Q-HB-30-01A), so the search is repeated with
    `check_levels` equal steps of each of those (the ones the delay grows with still at their
    ends, where their extreme lies) and a quantity the finer grid finds beyond the corners is
    widened to it and listed. The finer grid holds the corners' own points (an odd count), so
    the check can only widen.
    """
    levels = check_levels and check_levels_at(check_levels)
    widened: list[str] = []
    if not levels:
        extremes = corner_extremes(net)
    else:
        extremes, found = corners_and_check(net, levels)
        for key, (lo, typ, hi) in list(extremes.items()):
            f_lo, _f_typ, f_hi = found[key]  # the same evaluation: the finer grid's extremes
            extremes[key] = (min(lo, f_lo), typ, max(hi, f_hi))
            # listed as a miss of the corners only beyond float noise (equal delays computed
            # along different paths, e.g. thresholds that scale with the supply)
            noise = 1e-9 * max(abs(lo), abs(hi))
            if key in QUANTITIES and (f_lo < lo - noise or f_hi > hi + noise):
                widened.append(key)
    return WorstCase(
        edges={e: edge_range(*extremes["node_" + e]) for e in EDGES},
        channel={e: edge_range(*extremes[e]) for e in EDGES},
        pair={k: edge_range(*extremes[k]) for k in PAIR_KEYS},
        floats=extremes,
        widened=tuple(widened),
        check_levels=check_levels,
        check_points=grid_points(net, levels) if levels else 0,
    )


# --------------------------------------------------------------------------------------------
# Root-sum-square


@record
class Contribution:
    name: str  # parameter, prefixed 'high.' / 'low.' for the pair's channel parts
    sensitivity: float  # d quantity / d parameter, SI units
    sigma: float  # the parameter's standard uncertainty
    contribution: float  # |sensitivity| * sigma, seconds


@record
class RssResult:
    typ: float
    sigma: float
    contributions: tuple[Contribution, ...]  # largest first

    @property
    def low(self) -> float:
        return self.typ - 3.0 * self.sigma

    @property
    def high(self) -> float:
        return self.typ + 3.0 * self.sigma


def rss(
    net: ReferenceNetwork, distribution: str = "uniform", sigma_band: float = 3.0
) -> dict[str, RssResult]:
    """Root-sum-square of sensitivity x standard uncertainty (GUM 5.1.2) per quantity."""
    spread = spread_parameters(net)
    bands = parameter_bands(net)
    shared_names = [n for n in SHARED_PARAMS if n in spread]
    channel_names = [n for n in CHANNEL_PARAMS if n in spread]
    entries = [("", n) for n in shared_names]
    entries += [("high.", n) for n in channel_names] + [("low.", n) for n in channel_names]
    delta = 1e-4
    count = 1 + 2 * len(entries)
    shared: dict[str, FloatArray] = {n: np.full(count, 0.5) for n in shared_names}
    shared.setdefault("vdd", np.full(count, 0.5))
    high: dict[str, FloatArray] = {n: np.full(count, 0.5) for n in channel_names}
    low: dict[str, FloatArray] = {n: np.full(count, 0.5) for n in channel_names}
    for i, (prefix, name) in enumerate(entries):
        target = shared if prefix == "" else (high if prefix == "high." else low)
        target[name][1 + 2 * i] = 0.5 + delta
        target[name][2 + 2 * i] = 0.5 - delta
    results = evaluate(net, shared, high, low)
    out: dict[str, RssResult] = {}
    for key in QUANTITIES:
        values = results[key]
        contributions: list[Contribution] = []
        total = 0.0
        for i, (prefix, name) in enumerate(entries):
            lo, _typ, hi = _value_band(net, name, bands)
            dvalue = 2.0 * delta * (hi - lo)  # value(0.5+d) - value(0.5-d) on the piecewise map
            dq = float(values[1 + 2 * i] - values[2 + 2 * i])
            sens = dq / dvalue if dvalue else 0.0
            divisor = math.sqrt(3.0) if distribution == "uniform" else sigma_band
            sigma = (hi - lo) / 2.0 / divisor
            contribution = abs(sens) * sigma
            total += contribution**2
            if key.startswith("node_") and prefix == "low.":
                continue
            contributions.append(Contribution(prefix + name, sens, sigma, contribution))
        contributions.sort(key=lambda c: -c.contribution)
        out[key] = RssResult(float(values[0]), math.sqrt(total), tuple(contributions))
    return out


def _value_band(
    net: ReferenceNetwork, name: str, bands: Mapping[str, tuple[float, float, float]]
) -> tuple[float, float, float]:
    if name in ("vt_plus", "vt_minus"):
        band = net.vt_plus if name == "vt_plus" else net.vt_minus
        vdd = float(net.vdd.typ)
        lo, typ, hi = (lv.volts(vdd) for lv in band.levels())
        return lo, typ, hi
    return bands[name]


# --------------------------------------------------------------------------------------------
# Monte Carlo


@record
class MonteCarloResult:
    samples: int
    seed: int
    distribution: str
    sigma_band: float
    below_s: Fraction | None
    stats: dict[str, Stats]


def _draw(
    net: ReferenceNetwork,
    n: int,
    seed: int,
    chunk_index: int,
    distribution: str,
    sigma_band: float,
) -> dict[str, FloatArray]:
    rng = np.random.default_rng([seed, chunk_index])
    spread = spread_parameters(net)

    def one() -> FloatArray:
        if distribution == "uniform":
            return rng.random(n)
        return 0.5 + rng.standard_normal(n) / (2.0 * sigma_band)

    shared = {name: one() for name in SHARED_PARAMS if name in spread}
    high = {name: one() for name in CHANNEL_PARAMS if name in spread}
    low = {name: one() for name in CHANNEL_PARAMS if name in spread}
    if "vdd" not in shared:
        shared["vdd"] = np.full(n, 0.5)
    return evaluate(net, shared, high, low)


def _chunk_sizes(samples: int, chunk: int) -> list[int]:
    if samples < 1 or chunk < 1:
        raise ValueError("the sample count and the chunk size must be positive")
    return [min(chunk, samples - start) for start in range(0, samples, chunk)]


def monte_carlo_samples(
    net: ReferenceNetwork,
    samples: int = DEFAULT_SAMPLES,
    *,
    seed: int = 1,
    distribution: str = "uniform",
    sigma_band: float = 3.0,
    chunk: int = CHUNK,
    progress: Callable[[int, int], None] | None = None,
) -> dict[str, FloatArray]:
    """The seeded samples themselves, per quantity (QUANTITIES), in draw order.

    The very draws `monte_carlo` summarises for the same arguments (the same chunks of the same
    seeded generators), so a histogram of these shows the population its statistics describe.
    Holds every sample in memory: meant for figures, not for 10M-sample runs.
    """
    if distribution not in ("uniform", "normal"):
        raise ValueError(distribution)
    sizes = _chunk_sizes(samples, chunk)
    parts = []
    for i, n in enumerate(sizes):
        parts.append(_draw(net, n, seed, i, distribution, sigma_band))
        if progress is not None:
            progress(i + 1, len(sizes))
    return {key: np.concatenate([p[key] for p in parts]) for key in QUANTITIES}


def monte_carlo(
    net: ReferenceNetwork,
    samples: int = DEFAULT_SAMPLES,
    *,
    seed: int = 1,
    distribution: str = "uniform",
    sigma_band: float = 3.0,
    below_s: Fraction | None = None,
    chunk: int = CHUNK,
    progress: Callable[[int, int], None] | None = None,
) -> MonteCarloResult:
    """Seeded Monte Carlo of both channels' parts; exact percentiles in modest memory.

    `progress(done, total)` is called after each chunk (for a progress bar on a terminal)."""
    if distribution not in ("uniform", "normal"):
        raise ValueError(distribution)
    sizes = _chunk_sizes(samples, chunk)

    def chunk_results(i: int) -> dict[str, FloatArray]:
        return _draw(net, sizes[i], seed, i, distribution, sigma_band)

    below = float(below_s) if below_s is not None else None
    if samples <= _KEEP_ALL_LIMIT:
        drawn = monte_carlo_samples(net, samples, seed=seed, distribution=distribution,
                                    sigma_band=sigma_band, chunk=chunk, progress=progress)
        stats = {key: stats_direct(drawn[key], key, below) for key in QUANTITIES}
    else:
        stats = stats_streaming(chunk_results, len(sizes), samples, below, progress)
    return MonteCarloResult(samples, seed, distribution, sigma_band, below_s, stats)


def reference_dead_times(net: ReferenceNetwork) -> dict[str, EdgeRange]:
    """Worst-case dead-time ranges of the complementary pair over all tolerances.

    Keys 'to_high' and 'to_low'. Corners over the min/typ/max combinations of both channels'
    independent parts and the shared supply, temperature and pair inverter (band ends only for
    the resistances, capacitances and tempcos, where the delay's extremes lie), checked against
    the finer grid of `worst_case` so a non-monotonic response is not missed (the range is
    widened if the finer grid finds a value outside it). Min rounded down and max up to 1 ps. With a diode the edges come from the charge integral, which bounds the bypassed edge
    from above, so the range does not overstate the dead time (see the module docstring).
    """
    result = worst_case(net)
    return {key: result.pair[key] for key in PAIR_KEYS}
