"""Worst case, RSS and Monte Carlo of the reference network."""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import pytest

import gapforge.analog.statistics as statistics
import gapforge.analog.tolerance as tol
from gapforge.analog.parameters import network_from_options

BASE = {"vdd": "3.3", "rout": "25", "cin": "0", "cstray": "0", "r_tempco": "0", "c_tempco": "0",
        "temp": "25", "vt_plus": "2.0V", "vt_minus": "1.3V", "bypass": "none", "c_tol": "0"}


def _net(**over: str):  # type: ignore[no-untyped-def]
    return network_from_options({**BASE, "r": "10k", "c": "1n", **over})


def test_monte_carlo_stays_inside_the_corners_for_the_default_network() -> None:
    net = network_from_options({"r": "4.7k", "c": "100p"})
    extremes = tol.corner_extremes(net)
    mc = tol.monte_carlo(net, 20_000, seed=3)
    for key in tol.QUANTITIES:
        lo, typ, hi = extremes[key]
        s = mc.stats[key]
        assert lo <= s.min and s.max <= hi
        assert lo <= typ <= hi
        # and the corners are not absurdly wide: the samples reach most of the range
        assert (s.max - s.min) > 0.5 * (hi - lo)


def test_corners_too_narrow_are_widened_by_the_finer_grid(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    # ECSS-Q-HB-30-01A / reference-facts: extreme-value corners can miss the true extreme of a
    # non-monotonic response. Simulate a corner search that missed: the check must widen it.
    net = network_from_options({"r": "4.7k", "c": "100p"})
    search = tol.corners_and_check
    real = tol.corner_extremes(net)

    def narrow(net_, check):  # type: ignore[no-untyped-def]
        corners, finer = search(net_, check)
        corners = dict(corners)  # the corners miss; the finer grid does not
        _lo, typ, _hi = corners["to_high"]
        corners["to_high"] = (typ - 1e-12, typ, typ + 1e-12)
        return corners, finer

    monkeypatch.setattr(tol, "corners_and_check", narrow)
    wc = tol.worst_case(net)
    assert "to_high" in wc.widened
    assert wc.floats["to_high"][0] < real["to_high"][1] - 1e-9
    assert wc.floats["to_high"][0] == pytest.approx(real["to_high"][0], rel=1e-12)
    assert "to_low" not in wc.widened


def test_the_finer_grid_finds_an_extreme_between_the_corners(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    # A response with its peak inside the supply band (at a quarter of it), not at min, typ or
    # max: the 3-level corners miss it, the 5-level check lands on it and widens the maximum.
    net = network_from_options({"r": "4.7k", "c": "100p", "bypass": "none", "vdd": "3:3.3:3.6",
                               "temp": "25"})
    plain = tol.worst_case(net)
    assert plain.widened == ()
    delays = tol.channel_edge_delays
    lo_v, _typ_v, hi_v = (float(v) for v in (net.vdd.min, net.vdd.typ, net.vdd.max))

    def bumped(net_, v, edges=("rising", "falling"), **kw):  # type: ignore[no-untyped-def]
        out = dict(delays(net_, v, edges, **kw))
        where = (np.asarray(v["vdd"]) - lo_v) / (hi_v - lo_v)  # 0..1 across the band
        bump = 50e-9 * np.exp(-(((where - 0.25) / 0.05) ** 2))
        for edge in edges:
            out["node_" + edge] = out["node_" + edge] + bump
            out[edge] = out[edge] + bump
        return out

    monkeypatch.setattr(tol, "channel_edge_delays", bumped)
    wc = tol.worst_case(net)
    assert {"node_rising", "node_falling"} <= set(wc.widened)
    assert wc.floats["node_rising"][2] >= plain.floats["node_rising"][2] + 40e-9
    assert wc.check_levels == tol.CHECK_LEVELS == 5
    # the check's points: 5 supply levels (temperature fixed), the thresholds' 5, and the parts
    # the delay grows with at both ends, for each input edge, and the typical point
    assert wc.check_points == tol.grid_points(net, tol.check_levels_at(5)) == 1 + 2 * (5 * 5 * 2)


def test_the_corner_search_equals_the_full_grid_of_the_monotonic_parts() -> None:
    # INCREASING_PARAMS take one end per bound; the full grid (every end of every one of them,
    # the search before the shortcut) must give the same extremes, to the last digits of a
    # batch summed in another order, on networks of every kind (diode either way or none,
    # output inverter, bands of supply and temperature, tempcos, strays).
    import random

    rng = random.Random(22)
    nets = []
    while len(nets) < 24:
        raw = {"r": rng.choice(["100", "4.7k", "22k", "100k"]),
               "c": rng.choice(["10p", "100p", "1n"]),
               "r_tol": rng.choice(["0.1%", "1%", "5%"]), "c_tol": rng.choice(["1%", "10%"]),
               "r_tempco": rng.choice(["0ppm", "100ppm", "300ppm"]),
               "c_tempco": rng.choice(["0ppm", "30ppm"]),
               "cstray": rng.choice(["0", "1p:2p:5p"]), "rout": rng.choice(["25", "10:25:60"]),
               "bypass": rng.choice(["rising", "falling", "none"]),
               "vdd": rng.choice(["3.3", "3:3.3:3.6", "1.65:1.8:1.95"]),
               "temp": rng.choice(["25", "-40:25:125"]),
               "output_inverter": rng.choice(["true", "false"])}
        nets.append(network_from_options(raw))
    for net in nets:
        fast = tol.corner_extremes(net)
        saved = tol.INCREASING_PARAMS
        try:
            tol.INCREASING_PARAMS = ()  # every end of every monotonic parameter
            full = tol.corner_extremes(net)
        finally:
            tol.INCREASING_PARAMS = saved
        for key, values in full.items():
            assert fast[key] == pytest.approx(values, rel=1e-14, abs=1e-24), key


def test_rss_of_a_resistor_band_matches_the_gum_formula() -> None:
    # GUM 5.1.2 with 4.3.7: sigma_t = dt/dR * R * tol / sqrt(3) for a uniform band
    net = _net(r_tol="5%")
    result = tol.rss(net)["node_rising"]
    dt_dr = 1e-9 * math.log(3.3 / 1.3)
    assert result.sigma == pytest.approx(dt_dr * 10e3 * 0.05 / math.sqrt(3.0), rel=1e-6)
    assert result.contributions[0].name == "high.r"
    # the dead time sees both channels' resistors: sqrt(2) times one
    pair = tol.rss(net)["to_high"]
    assert pair.sigma == pytest.approx(math.sqrt(2.0) * result.sigma, rel=1e-6)


def test_monte_carlo_is_seeded_and_its_percentiles_follow_the_uniform_band() -> None:
    net = _net(r_tol="10%")
    a = tol.monte_carlo(net, 50_000, seed=7)
    b = tol.monte_carlo(net, 50_000, seed=7)
    c = tol.monte_carlo(net, 50_000, seed=8)
    assert a.stats == b.stats and a.stats != c.stats
    k = 1e-9 * math.log(3.3 / 1.3)
    s = a.stats["node_rising"]
    # uniform R in 9k..11k: t is uniform between (9k + 25) k and (11k + 25) k
    lo, hi = (9e3 + 25) * k, (11e3 + 25) * k
    assert s.percentiles[1] == pytest.approx((lo + hi) / 2, rel=2e-3)
    assert s.percentiles[0] == pytest.approx(lo + 0.00135 * (hi - lo), rel=2e-3)
    assert s.percentiles[2] == pytest.approx(lo + 0.99865 * (hi - lo), rel=2e-3)
    assert lo <= s.min and s.max <= hi


def test_share_below_a_minimum_dead_time() -> None:
    net = _net(r_tol="10%")
    typ = tol.typical(net)["to_high"]
    mc = tol.monte_carlo(net, 40_000, seed=1, below_s=Fraction(typ))
    share = mc.stats["to_high"].share_below
    assert share is not None and share == pytest.approx(0.5, abs=0.02)
    assert mc.stats["node_rising"].share_below is None


def test_normal_distribution_has_the_chosen_sigma() -> None:
    net = _net(r_tol="9%")
    mc = tol.monte_carlo(net, 60_000, seed=2, distribution="normal", sigma_band=3.0)
    k = 1e-9 * math.log(3.3 / 1.3)
    # band ends (+/- 900 ohm) at 3 sigma: sigma_R = 300 ohm; the median sits at typ
    s = mc.stats["node_rising"]
    assert s.percentiles[1] == pytest.approx((10e3 + 25) * k, rel=2e-3)
    spread = (s.percentiles[2] - s.percentiles[0]) / 6.0  # 0.135..99.865 % = +/- 3 sigma
    assert spread == pytest.approx(300 * k, rel=0.05)


def test_streaming_statistics_equal_the_direct_ones(monkeypatch: pytest.MonkeyPatch) -> None:
    net = network_from_options({"r": "4.7k", "c": "100p"})
    direct = tol.monte_carlo(net, 30_001, seed=5, chunk=7_000, below_s=Fraction(460, 10**9))
    monkeypatch.setattr(tol, "_KEEP_ALL_LIMIT", 0)
    streamed = tol.monte_carlo(net, 30_001, seed=5, chunk=7_000, below_s=Fraction(460, 10**9))
    for key in tol.QUANTITIES:
        d, s = direct.stats[key], streamed.stats[key]
        assert (d.min, d.max, d.percentiles, d.share_below) == (
            s.min, s.max, s.percentiles, s.share_below)
        assert d.mean == pytest.approx(s.mean, rel=1e-12)
    # and the direct path is numpy's own percentile of the same samples
    samples = np.concatenate([tol._draw(net, 7_000 if i < 4 else 2_001, 5, i, "uniform", 3.0)
                              ["to_low"] for i in range(5)])
    assert direct.stats["to_low"].percentiles == tuple(np.percentile(samples, statistics.PERCENTILES))


def test_streaming_falls_back_to_exact_passes_when_a_window_misses(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    # the one-pass streaming keeps values in windows set from the first chunk; a window that
    # misses its rank must not give a wrong percentile (issue 14: streaming at in-memory cost)
    net = network_from_options({"r": "4.7k", "c": "100p"})
    direct = tol.monte_carlo(net, 20_000, seed=3, chunk=5_000)
    monkeypatch.setattr(tol, "_KEEP_ALL_LIMIT", 0)
    monkeypatch.setattr(statistics, "_pilot_windows", lambda p, w, t: [(0.0, 0.0)] * 3)
    streamed = tol.monte_carlo(net, 20_000, seed=3, chunk=5_000)
    for key in tol.QUANTITIES:
        assert direct.stats[key].percentiles == streamed.stats[key].percentiles


@pytest.mark.parametrize(("samples", "chunk"), [(20_000, tol.CHUNK), (30_001, 7_000)])
def test_samples_are_the_population_monte_carlo_describes(samples: int, chunk: int) -> None:
    # The histogram drawn from monte_carlo_samples must show what monte_carlo's statistics say:
    # same seed -> the samples' min, max, mean and 0.135 / 50 / 99.865 percentiles (numpy's
    # linear-interpolation percentile, the definition monte_carlo documents) are its statistics.
    net = network_from_options({"r": "4.7k", "c": "100p", "bypass": "falling"})
    drawn = tol.monte_carlo_samples(net, samples, seed=11, chunk=chunk)
    mc = tol.monte_carlo(net, samples, seed=11, chunk=chunk)
    for key in tol.QUANTITIES:
        values = drawn[key]
        s = mc.stats[key]
        assert values.shape == (samples,)
        assert (float(values.min()), float(values.max())) == (s.min, s.max)
        assert tuple(float(p) for p in np.percentile(values, statistics.PERCENTILES)) == s.percentiles
        assert float(values.mean()) == pytest.approx(s.mean, rel=1e-12)
    # and the seed matters
    other = tol.monte_carlo_samples(net, samples, seed=12, chunk=chunk)
    assert not np.array_equal(other["to_high"], drawn["to_high"])


def test_samples_match_the_streamed_statistics(monkeypatch: pytest.MonkeyPatch) -> None:
    net = network_from_options({"r": "4.7k", "c": "100p"})
    drawn = tol.monte_carlo_samples(net, 25_000, seed=4, chunk=6_000, distribution="normal")
    monkeypatch.setattr(tol, "_KEEP_ALL_LIMIT", 0)
    streamed = tol.monte_carlo(net, 25_000, seed=4, chunk=6_000, distribution="normal")
    for key in tol.PAIR_KEYS:
        s = streamed.stats[key]
        assert (float(drawn[key].min()), float(drawn[key].max())) == (s.min, s.max)
        assert np.percentile(drawn[key], statistics.PERCENTILES) == pytest.approx(s.percentiles,
                                                                            rel=1e-12)


def test_samples_follow_the_uniform_band_of_one_resistor() -> None:
    # uniform R in 9k..11k (10 % band): the node delay (R + 25) x 1 nF x ln(3.3 / 1.3) is uniform
    # between its ends (Sedra & Smith STC delay; a uniform variable through a linear map)
    net = _net(r_tol="10%")
    drawn = tol.monte_carlo_samples(net, 40_000, seed=3)["node_rising"]
    k = 1e-9 * math.log(3.3 / 1.3)
    lo, hi = (9e3 + 25) * k, (11e3 + 25) * k
    assert lo <= float(drawn.min()) and float(drawn.max()) <= hi
    counts, _ = np.histogram(drawn, bins=10, range=(lo, hi))
    assert counts.sum() == 40_000
    assert int(counts.min()) > 0.9 * 4_000 and int(counts.max()) < 1.1 * 4_000


def test_samples_refuse_an_empty_run() -> None:
    net = _net(r_tol="10%")
    with pytest.raises(ValueError):
        tol.monte_carlo_samples(net, 0)
    with pytest.raises(ValueError):
        tol.monte_carlo_samples(net, 10, distribution="triangular")


def test_corners_of_many_pairs_equal_each_pair_on_its_own() -> None:
    # preferred.suggest checks every candidate's worst case in one evaluation: each row must be
    # that pair's own corner search (to rounding: the batch sums in another order)
    from dataclasses import replace

    for raw in ({"r": "4.7k", "c": "100p"},
                {"r": "4.7k", "c": "100p", "bypass": "rising", "output_inverter": "true",
                 "vf": "0.4", "inverter_delay": "1n:2n:4n"},
                {**BASE, "r": "10k", "c": "1n", "r_tol": "0"}):
        net = network_from_options(raw)
        parts = [(Fraction(121), Fraction(39, 10**10)), (net.r, net.c),
                 (Fraction(22000), Fraction(47, 10**12))]
        many = tol.corner_extremes_for_parts(net, parts)
        typ = tol.typical_for_parts(net, parts)
        for k, (r, c) in enumerate(parts):
            alone = replace(net, r=r, c=c)
            single = tol.corner_extremes(alone)
            assert many[k].keys() == single.keys()
            for key, values in single.items():
                assert many[k][key] == pytest.approx(values, rel=1e-12, abs=1e-21)
            for key, value in tol.typical(alone).items():
                assert float(typ[key][k]) == pytest.approx(value, rel=1e-12)




def test_the_corners_are_the_finer_grids_own_points() -> None:
    # worst_case evaluates the finer grid once and reads the corners off its min/typ/max
    # points: they must be the corner search's own result (to the last digits of a batch
    # summed in another order), and the finer grid can only widen them.
    for raw in ({"r": "4.7k", "c": "100p"},
                {"r": "470", "c": "47p", "bypass": "rising", "output_inverter": "true",
                 "vdd": "3:3.3:3.6", "r_tempco": "100ppm", "cstray": "1p:2p:5p"}):
        net = network_from_options(raw)
        corners, finer = tol.corners_and_check(net, tol.check_levels_at(5))
        alone = tol.corner_extremes(net)
        for key, values in alone.items():
            assert corners[key] == pytest.approx(values, rel=1e-14, abs=1e-24), key
            assert finer[key][0] <= corners[key][0] and finer[key][2] >= corners[key][2]


# Two networks of a seeded sweep (review of issue 22): small R and C for a nanosecond gap, a
# diode whose zero-bias junction capacitance is comparable to C or larger (a power Schottky's
# is tens of pF: common practice). There the bypassed edge's delay falls as R grows.
JUNCTION_HEAVY = (
    {"r": "220.6", "c": "19.31p", "vdd": "3.742:4.158:4.574", "temp": "-5.4:25:59.4",
     "diode": "IS=1.01e-11 N=1.08 RS=5 CJO=49.3p VJ=0.585 M=0.512 EG=1.11 XTI=3 BV=20",
     "r_tol": "5%", "c_tol": "10%", "r_tempco": "300ppm", "c_tempco": "0ppm",
     "rout": "5:15:40", "cstray": "0", "cin": "0", "bypass": "falling",
     "_where": "vdd=0 temp=0 vt_minus=0 rout=1 c=1 r_tc=1"},
    {"r": "121.8", "c": "14.18p", "vdd": "6.576:7.307:8.038", "temp": "8.3:25:82.2",
     "diode": "IS=1.16e-12 N=1.84 RS=0 CJO=26.4p VJ=0.413 M=0.398 EG=0.69 XTI=3 BV=20",
     "r_tol": "1%", "c_tol": "1%", "r_tempco": "0ppm", "c_tempco": "30ppm", "rout": "25",
     "cstray": "0", "cin": "3p:5p:8p", "bypass": "falling", "output_inverter": "true",
     "_where": "vdd=0 temp=1 vt_minus=0 rout=0 c=1 cin=1"},
)


def _with(monotone, increasing):  # type: ignore[no-untyped-def]
    """The search with these parameter sets (a context manager)."""
    class Patch:
        def __enter__(self) -> None:
            self.saved = tol.MONOTONE_PARAMS, tol.INCREASING_PARAMS
            tol.MONOTONE_PARAMS, tol.INCREASING_PARAMS = monotone, increasing

        def __exit__(self, *exc: object) -> None:
            tol.MONOTONE_PARAMS, tol.INCREASING_PARAMS = self.saved

    return Patch()


@pytest.mark.parametrize("raw", JUNCTION_HEAVY)
def test_r_across_a_diode_takes_both_ends_for_each_bound(
    raw: dict[str, str], monkeypatch: pytest.MonkeyPatch
) -> None:
    # The premise first: on this network the bypassed edge's node delay falls as R grows (the
    # junction's charge current, not R's, carries much of the edge), so taking R at its high
    # end for the maximum, as for a plain RC, found a maximum 16 ps (0.4 %) short, on the side
    # that shortens the minimum dead time.
    raw = dict(raw)
    where = {k: float(v) for k, v in (w.split("=") for w in raw.pop("_where").split())}
    net = network_from_options(raw)
    from gapforge.analog.corners import values_at

    pos = {k: np.full(3, v) for k, v in where.items()}  # the full grid's maximum, but for R
    pos["r"] = np.asarray([0.0, 0.5, 1.0])
    node = tol.channel_edge_delays(net, values_at(net, pos), ("falling",))["node_falling"]
    assert node[0] > node[1] > node[2]
    fast = tol.corner_extremes(net)
    with _with(tol.MONOTONE_PARAMS, ()):  # every end of every monotonic parameter
        full = tol.corner_extremes(net)
    with _with(tol.MONOTONE_PARAMS - {"r"}, ()):  # and R at 9 levels
        finer_r = tol.corner_extremes(net, tol.check_levels_at(9))
    for key, values in full.items():
        assert fast[key] == pytest.approx(values, rel=1e-14, abs=1e-24), key
    assert fast["node_falling"][2] == pytest.approx(finer_r["node_falling"][2], rel=1e-12)
    monkeypatch.setattr(tol, "BOTH_ENDS_WITH_DIODE", ())  # R at one end per bound, as before
    one_end = tol.corner_extremes(net)
    assert one_end["node_falling"][2] < fast["node_falling"][2] - 5e-12


def test_the_residual_guard_resolves_every_corner_of_the_realistic_box() -> None:
    # The charge integral refuses an edge whose end point holds no float root (a NaN, refused
    # in one line). No false alarm on the corners of the box of realistic diode cards (IS
    # 1e-12..1e-5 A, N 1..2, CJO 0..50 pF: small-signal silicon to power Schottky, common
    # practice) with R 100..100k, C 10p..10n, VDD 1.8..15 V and -40..150 C: all resolve and
    # bound every quantity. (The review ran the same over 2,048 corners, both bypass edges, RS
    # and EG too: none refused.)
    import itertools

    for is_, n, cjo, r, c, vdd in itertools.product(
        ("1e-12", "1e-5"), ("1", "2"), ("0", "50p"), ("100", "100k"), ("10p", "10n"),
        ("1.8", "15"),
    ):
        net = network_from_options({
            "r": r, "c": c, "vdd": vdd, "temp": "-40:25:150", "bypass": "falling",
            "rout": "5:15:40",
            "diode": f"IS={is_} N={n} RS=0 CJO={cjo} VJ=0.7 M=0.4 EG=0.69 XTI=3 BV=40"})
        wc = tol.worst_case(net)
        for lo, typ, hi in wc.floats.values():
            assert math.isfinite(lo) and math.isfinite(hi) and lo <= typ <= hi
