"""`gapforge analog`: what the RC-diode-Schmitt reference network really delivers.

Every part of the network is an option (engineering notation, min:typ:max where it varies), or
`--design FILE` reads the design's `[reference]` section (options given as well override it).
The options are generated from `analog.PARAMETERS`, the same table the design file uses.
numpy is imported only inside the command function.
"""

from __future__ import annotations

import contextlib
import json
import sys
import warnings
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from fractions import Fraction
from pathlib import Path
from typing import Any, TypeVar

import click

from gapforge.analog.network import (
    CAUTION,
    DEFAULT_LEAKAGE_SHARE,
    EDGES,
    PAIR_KEYS,
    ReferenceNetwork,
)
from gapforge.analog.parameters import LEVEL_PRESETS, PARAMETERS, network_from_options
from gapforge.analog.preferred import RANKINGS, SERIES_NAMES
from gapforge.base.errors import GapforgeError
from gapforge.base.quantities import format_quantity, parse_quantity, parse_tolerance
from gapforge.cli.analog_suggest import suggest_arg, suggest_step
from gapforge.cli.analog_text import render_text
from gapforge.cli.options import json_option

F = TypeVar("F", bound=Callable[..., Any])


def _network_options(f: F) -> F:
    for p in reversed(PARAMETERS):
        flag = "--" + p.name.replace("_", "-")
        if p.kind == "flag":
            f = click.option(
                f"{flag}/--no-{flag[2:]}", p.name, default=None, help=f"{p.help} [default: no]"
            )(f)
            continue
        default = p.default if p.default else ("derived" if p.name == "vf" else "none")
        shown = "required" if p.default is None else f"default: {default}"
        if p.source:
            shown += f"; {p.source}"
        f = click.option(flag, p.name, type=str, default=None, help=f"{p.help} [{shown}]")(f)
    return f


@click.command(
    "analog", context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100}
)
@click.option("--design", "design", type=click.Path(path_type=Path), default=None,
              help="Read the network from a design file's [reference] section.")
@_network_options
@click.option("--levels", "levels", type=click.Choice(sorted(LEVEL_PRESETS)), default=None,
              help="A JEDEC interface standard (" + ", ".join(
                  f"{k}: {v.citation}" for k, v in sorted(LEVEL_PRESETS.items()))
              + ") fills only what it states: the supply (unless --vdd) and VT+ max = VIH min, "
              "VT- min = VIL max. Give the part's own --vt-plus MIN:TYP and --vt-minus TYP:MAX "
              "(required with a preset; a full MIN:TYP:MAX stays as given).")
@click.option("--simulate", is_flag=True,
              help="Add the transient simulation (SPICE-style diode) and the slow edge over "
              "temperature.")
@click.option("--leakage-warn", default=f"{int(DEFAULT_LEAKAGE_SHARE * 100)}%", show_default=True,
              help="Warn, and exit 1, when diode leakage at the hottest temperature takes more "
              "than this share of a slow edge: the dead time vanishes on a hot board (typical "
              "parts; the charge-integral model always, the transient as well with --simulate).")
@click.option("--model-warn", default="10%", show_default=True,
              help="Warn when the model the ranges come from and the transient simulation "
              "differ by more than this share on any edge (with --simulate).")
@click.option("--monte-carlo", "monte_carlo", is_flag=False, flag_value="100k", default=None,
              help="Monte Carlo samples (100k when given without a value; up to 10M).")
@click.option("--seed", type=int, default=1, show_default=True, help="Monte Carlo seed.")
@click.option("--distribution", type=click.Choice(["uniform", "normal"]), default="uniform",
              show_default=True, help="Uniform over each band, or normal with the band ends at "
              "--sigma-band sigma.")
@click.option("--sigma-band", type=float, default=3.0, show_default=True,
              help="For --distribution normal: the band ends lie this many sigma out.")
@click.option("--min-dead", "min_dead", default=None,
              help="Smallest acceptable dead time: report the share of samples below it; exit 1 "
              "when the worst case falls below it.")
@click.option("--suggest", "suggest_t", default=None,
              help="MIN:MAX (e.g. 114ns:300ns): list the preferred-value R/C pairs whose "
              "worst-case range of the dead time lies inside that window, best centred first. "
              "A single time: pairs near that typical dead time.")
@click.option("--suggest-for", type=click.Choice(list(PAIR_KEYS)), default="to_high",
              show_default=True, help="Which dead time --suggest aims at.")
@click.option("--suggest-rank", type=click.Choice(list(RANKINGS)), default="worst-case",
              show_default=True, help="Rank --suggest pairs by their worst-case range (its "
              "farthest end from the target) or by their typical error. Pairs whose worst-case "
              "dead time is not positive or below --min-dead are never proposed.")
@click.option("--series", type=click.Choice(list(SERIES_NAMES)), default="E96",
              show_default=True, help="Resistor series for --suggest (IEC 60063); its usual "
              "tolerance (E6 20 %, E12 10 %, E24 5 %, E48 2 %, E96 1 %, E192 0.5 %) unless "
              "--r-tol is given.")
@click.option("--c-series", type=click.Choice(list(SERIES_NAMES)), default="E12",
              show_default=True, help="Capacitor series for --suggest; its usual tolerance "
              "unless --c-tol is given.")
@json_option
def command(
    design: Path | None,
    levels: str | None,
    simulate: bool,
    leakage_warn: str,
    model_warn: str,
    monte_carlo: str | None,
    seed: int,
    distribution: str,
    sigma_band: float,
    min_dead: str | None,
    suggest_t: str | None,
    suggest_for: str,
    suggest_rank: str,
    series: str,
    c_series: str,
    as_json: bool,
    **network: Any,
) -> None:
    """Model the RC-diode-Schmitt reference network: edge delays, dead times, tolerances.

    Times are from an ideal input step. A dead time is the delayed turn-on of one output minus
    the undelayed turn-off of the other on the same input edge: to_high before the high side
    turns on, to_low before the low side does.

    The model bounds each edge on the safe side of a dead time: the slow (resistor) edge from
    below (within 1.5 % of ngspice, 0.05 % without junction capacitance), the bypassed edge from
    above (exact without junction capacitance).

    Exit 1 when a worst-case dead time is not positive (the network can overlap) or falls below
    --min-dead, when diode leakage at the hottest temperature takes more than --leakage-warn of
    a slow edge (the dead time vanishes on a hot board), or when --suggest finds no safe pair.
    """
    with warnings.catch_warnings():  # no library warning reaches the terminal (issue 14)
        warnings.simplefilter("ignore")
        _run(design, levels, simulate, leakage_warn, model_warn, monte_carlo, seed, distribution,
             sigma_band, min_dead, suggest_t, suggest_for, suggest_rank, series, c_series,
             as_json, network)


def _run(
    design: Path | None, levels: str | None, simulate: bool, leakage_warn: str, model_warn: str,
    monte_carlo: str | None, seed: int, distribution: str, sigma_band: float,
    min_dead: str | None, suggest_t: str | None, suggest_for: str, suggest_rank: str,
    series: str, c_series: str, as_json: bool, network: dict[str, Any],
) -> None:
    """The command's work: read, analyse, print, exit 1 on a violated limit."""
    raw = {k: v for k, v in network.items() if v is not None}
    if levels is not None:
        raw["levels"] = levels
    net = _load(design, raw)
    samples = _count(monte_carlo, "--monte-carlo") if monte_carlo is not None else None
    if sigma_band <= 0:
        raise GapforgeError("must be greater than zero", "--sigma-band")
    below = parse_quantity(min_dead, "s", "--min-dead") if min_dead is not None else None
    warn_share = parse_tolerance(leakage_warn, "--leakage-warn")
    model_share = parse_tolerance(model_warn, "--model-warn")
    target, window = suggest_arg(suggest_t)
    with _progress_bar(samples) as progress:
        report = analyse(
            net,
            progress=progress,
            simulate=simulate,
            samples=samples,
            seed=seed,
            distribution=distribution,
            sigma_band=sigma_band,
            below=below,
            warn_share=warn_share,
            model_share=model_share,
            target=target,
            window=window,
            suggest_for=suggest_for,
            suggest_rank=suggest_rank,
            r_series=series,
            c_series=c_series,
        )
    if as_json:
        click.echo(json.dumps(report, indent=2, sort_keys=True))
    else:
        click.echo(render_text(report), nl=False)
    if report["limit_violated"]:
        sys.exit(1)


@contextlib.contextmanager
def _progress_bar(samples: int | None) -> Iterator[Callable[[int, int], None] | None]:
    """A Monte Carlo progress bar on standard error, only when that is a terminal (never in
    piped output or JSON); None otherwise."""
    if samples is None or not sys.stderr.isatty():
        yield None
        return
    with click.progressbar(length=samples, label="Monte Carlo", file=sys.stderr) as bar:
        shown = 0

        def advance(done: int, total: int) -> None:
            nonlocal shown
            reached = samples * done // total
            bar.update(reached - shown)
            shown = reached

        yield advance


def _load(design: Path | None, raw: dict[str, object]) -> ReferenceNetwork:
    if design is None:
        return network_from_options(raw)
    from gapforge.analog.parameters import read_reference
    from gapforge.base.schema import Reader, load_toml

    data, _ = load_toml(design)
    reader = Reader(str(design))
    section = data.get("reference")
    if section is None:
        raise GapforgeError("no [reference] section", str(design))
    table = reader.table(section, "reference")
    if isinstance(table.data, dict):
        table.data = {**table.data, **raw}
    net = read_reference(table)
    reader.finish()
    return net


def _count(text: str, where: str) -> int:
    value = parse_quantity(text, "", where)
    if value.denominator != 1:
        raise GapforgeError(f"{text!r} is not a whole number of samples", where)
    if not 100 <= value <= 10**7:
        raise GapforgeError("expected 100 to 10M samples", where)
    return int(value)


def _range(lo: float, typ: float, hi: float) -> dict[str, float]:
    return {"min_s": lo, "typ_s": typ, "max_s": hi}


@dataclass
class _Options:
    """What `analyse` was asked for, beside the network."""

    simulate: bool = False
    samples: int | None = None
    seed: int = 1
    distribution: str = "uniform"
    sigma_band: float = 3.0
    below: Fraction | None = None
    warn_share: Fraction = DEFAULT_LEAKAGE_SHARE
    model_share: Fraction = Fraction(1, 10)
    target: Fraction | None = None
    window: tuple[Fraction, Fraction] | None = None
    suggest_for: str = "to_high"
    suggest_rank: str = "worst-case"
    r_series: str = "E96"
    c_series: str = "E12"
    progress: Callable[[int, int], None] | None = None


@dataclass
class _Report:
    """The report under construction: the JSON-ready dict, its warnings, the exit verdict."""

    data: dict[str, Any] = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)
    limit_violated: bool = False


def analyse(net: ReferenceNetwork, **options: Any) -> dict[str, Any]:
    """Everything `analog` reports, as a JSON-ready dict (floats for display only).

    Named steps, in the order of the report: the edges, the pair's worst case and its limits,
    the network's findings (leakage, junction coupling, knee, default diode), RSS, the Monte
    Carlo, the transient, the preferred pairs. `options` are `_Options`' fields.
    """
    from gapforge.analog.tolerance import worst_case

    opts = _Options(**options)
    out = _Report()
    wc = worst_case(net)
    _edges_step(net, wc, out)
    _pair_step(net, wc, opts, out)
    leakage_warned = _findings_step(net, opts, out)
    _rss_step(net, wc, opts, out)
    if opts.samples is not None:
        _monte_carlo_step(net, wc, opts, out)
    if opts.simulate:
        out.data["simulation"] = _simulation(net, opts.warn_share, float(opts.model_share),
                                             out.data["edges"], out.warnings, leakage_warned)
        out.limit_violated = out.limit_violated or out.data["simulation"]["leakage_warning"]
    if opts.target is not None or opts.window is not None:
        suggest_step(net, opts, out)
    out.data["warnings"] = out.warnings
    out.data["limit_violated"] = out.limit_violated
    # the one vocabulary (README): a violated limit (overlap, --min-dead, hot leakage, no pair
    # for --suggest) is "fail"
    out.data["verdict"] = "fail" if out.limit_violated else "ok"
    out.data["min_dead_s"] = float(opts.below) if opts.below is not None else None
    return out.data


def _edges_step(net: ReferenceNetwork, wc: Any, out: _Report) -> None:
    """Each input edge: node delay range, textbook form, channel range, knee note."""
    from gapforge.analog.describe import bypass_notes, describe_parameters
    from gapforge.analog.tolerance import typical_textbook

    notes = bypass_notes(net)
    textbook = typical_textbook(net)
    edges: dict[str, Any] = {}
    for edge in EDGES:
        lo, typ, hi = wc.floats["node_" + edge]
        clo, ctyp, chi = wc.floats[edge]
        edges[edge] = {
            "bypassed": net.bypass == edge,
            "model": "rc closed form" if net.bypass == "none" else "charge integral",
            "bound": "exact" if net.bypass == "none" else
            ("upper bound" if net.bypass == edge else "lower bound"),
            "delay_s": typ,
            "delay_textbook_s": textbook["node_" + edge],
            "min_s": lo,
            "max_s": hi,
            "channel": _range(clo, ctyp, chi),
        }
        if edge in notes:
            edges[edge]["note"] = notes[edge]
    out.data.update({
        "caution": CAUTION,
        "parameters": {
            name: {"value": text, "default": is_default,
                   "source": source if is_default else "given"}
            for name, text, is_default, source in describe_parameters(net)
        },
        "edges": edges,
        "worst_case": {
            "method": ("every min/typ/max corner (band ends of the parameters the delay is "
                       "monotonic in), checked against a finer grid of the same corners"),
            "check_levels": wc.check_levels,
            "check_points": wc.check_points,
            "widened_by_check": list(wc.widened),
        },
    })


def _pair_step(net: ReferenceNetwork, wc: Any, opts: _Options, out: _Report) -> None:
    """The pair's worst-case dead times, the overlap finding and --min-dead."""
    from gapforge.analog.findings import overlap_finding

    for key in PAIR_KEYS:
        rng = wc.pair[key]
        out.data[key] = {
            "min_s": float(rng.min_s),
            "typ_s": float(rng.typ_s),
            "max_s": float(rng.max_s),
            "min_ps": int(rng.min_s * 10**12),
            "max_ps": int(rng.max_s * 10**12),
        }
        overlap = overlap_finding(net, key, rng)
        if overlap is not None:
            out.limit_violated = True
            out.warnings.append(overlap)
        if opts.below is not None and rng.min_s < opts.below:
            out.limit_violated = True
            out.warnings.append(
                f"{key}: the worst-case minimum {format_quantity(rng.min_s, 's')} is below "
                f"--min-dead {format_quantity(opts.below, 's')}"
            )
    out.data["can_overlap"] = any(wc.pair[k].min_s <= 0 for k in PAIR_KEYS)
    out.data["below_min_dead"] = [k for k in PAIR_KEYS
                                  if opts.below is not None and wc.pair[k].min_s < opts.below]


def _findings_step(net: ReferenceNetwork, opts: _Options, out: _Report) -> bool:
    """Leakage, junction coupling, knee and default-diode findings, in the words
    `analog.reference_findings` gives every build. True when the leakage warned."""
    from gapforge.analog.describe import bypass_notes
    from gapforge.analog.findings import (
        coupling_finding,
        default_diode_note,
        hottest_leakage_warnings,
        slow_edge_coupling,
        slow_edge_leakage,
    )

    leakage_points = slow_edge_leakage(net)
    leakage = hottest_leakage_warnings(leakage_points, opts.warn_share, "model")
    out.warnings += leakage
    coupling_points = slow_edge_coupling(net)
    coupling = coupling_finding(net, coupling_points, opts.warn_share)
    if coupling is not None:
        out.warnings.append(coupling)
    notes = bypass_notes(net)
    out.warnings += [notes[e] for e in EDGES if e in notes]
    diode_note = default_diode_note(net)
    if diode_note is not None:
        out.warnings.append(diode_note)
    out.limit_violated = out.limit_violated or bool(leakage)
    out.data["coupling"] = {
        "method": "charge-integral model, typical parts, with and without the diode's junction "
        "capacitance",
        "slow_edge_over_temperature": [
            {"temp_c": p.temp_c, "edge": p.edge, "delay_s": p.delay_s,
             "delay_no_cj_s": p.delay_no_cj_s, "share": p.share}
            for p in coupling_points
        ],
        "warning": coupling is not None,
        "warn_share": float(opts.warn_share),
    }
    out.data["leakage"] = {
        "method": "charge-integral model, typical parts, with and without the diode's leakage",
        "slow_edge_over_temperature": [
            {"temp_c": p.temp_c, "edge": p.edge, "delay_s": p.delay_s,
             "delay_no_leakage_s": p.delay_no_leakage_s, "leakage_erosion": p.erosion}
            for p in leakage_points
        ],
        "warning": bool(leakage),
        "warn_share": float(opts.warn_share),
    }
    return bool(leakage)


def _rss_step(net: ReferenceNetwork, wc: Any, opts: _Options, out: _Report) -> None:
    """The root-sum-square estimate beside the worst case."""
    from gapforge.analog.tolerance import rss

    sums = rss(net, opts.distribution, opts.sigma_band)
    out.data["rss"] = {
        key: {
            "method": "statistical estimate: typ +/- 3 sigma from root-sum-square "
            "sensitivities (GUM 5.1.2); the worst case is the bound",
            "typ_s": r.typ,
            "sigma_s": r.sigma,
            "low_3sigma_s": r.low,
            "high_3sigma_s": r.high,
            "beyond_worst_case": r.low < wc.floats[key][0] or r.high > wc.floats[key][2],
            "contributions": [
                {"parameter": c.name, "sensitivity": c.sensitivity, "sigma": c.sigma,
                 "contribution_s": c.contribution}
                for c in r.contributions[:6]
            ],
        }
        for key, r in sums.items()
    }


def _monte_carlo_step(net: ReferenceNetwork, wc: Any, opts: _Options, out: _Report) -> None:
    """The seeded Monte Carlo (its progress reported through `opts.progress`), held against the
    worst case: a sample beyond it is a response the corner search missed, and the worst case
    (which every build uses) is then not proven for this network."""
    from gapforge.analog.tolerance import monte_carlo

    assert opts.samples is not None
    mc = monte_carlo(
        net, opts.samples, seed=opts.seed, distribution=opts.distribution,
        sigma_band=opts.sigma_band, below_s=opts.below, progress=opts.progress,
    )
    below = opts.below
    out.data["monte_carlo"] = {
        "samples": mc.samples,
        "seed": mc.seed,
        "distribution": mc.distribution,
        "sigma_band": mc.sigma_band if opts.distribution == "normal" else None,
        "below_s": float(below) if below is not None else None,
        "results": {
            key: {
                "min_s": s.min,
                "max_s": s.max,
                "mean_s": s.mean,
                "p0_135_s": s.percentiles[0],
                "p50_s": s.percentiles[1],
                "p99_865_s": s.percentiles[2],
                "share_below": s.share_below,
                "beyond_worst_case": _beyond(s.min, s.max, wc.floats[key]),
            }
            for key, s in mc.stats.items()
        },
    }
    for key, s in mc.stats.items():
        if _beyond(s.min, s.max, wc.floats[key]):
            lo, _typ, hi = wc.floats[key]
            out.warnings.append(
                f"{key}: the Monte Carlo reached {s.min:.6g} .. {s.max:.6g} s, beyond the worst "
                f"case {lo:.6g} .. {hi:.6g} s: the corner search missed a non-monotonic extreme, "
                "so the worst case every build uses is not proven for this network")
            out.limit_violated = True


def _beyond(low: float, high: float, band: tuple[float, float, float]) -> bool:
    """A sampled range outside a worst-case band (beyond the last digits of the float sums)."""
    lo, _typ, hi = band
    slack = 1e-12 * max(abs(lo), abs(hi), 1e-12)
    return low < lo - slack or high > hi + slack


def _simulation(
    net: ReferenceNetwork,
    warn_share: Fraction,
    model_share: float,
    edges: dict[str, Any],
    warnings: list[str],
    model_warned: bool,
) -> dict[str, Any]:
    """The transient results; its leakage warning is added unless the model's already was."""
    from gapforge.analog.findings import hottest_leakage_warnings
    from gapforge.analog.simulate import simulated_node_delays, slow_edge_over_temperature

    sim = simulated_node_delays(net)
    model_off = False
    for edge in EDGES:
        e = edges[edge]
        e["delay_sim_s"] = sim[edge]
        e["model_vs_sim"] = e["delay_s"] / sim[edge] - 1.0 if sim[edge] > 0 else 0.0
        e["textbook_vs_sim"] = e["delay_textbook_s"] / sim[edge] - 1.0 if sim[edge] > 0 else 0.0
        if not e["bypassed"] and e["delay_s"] <= 0.0:
            warnings.append(
                f"note: the model cannot resolve the slow {edge} edge: the step coupled through "
                "the diode's junction capacitance alone passes the threshold, so it takes 0 s "
                f"(a lower bound); the transient shows {format_quantity(sim[edge], 's', 4)}"
            )
        elif abs(e["model_vs_sim"]) > model_share:
            model_off = True
            warnings.append(
                f"WARNING: THE MODEL AND THE SIMULATION DISAGREE ON THE {edge.upper()} EDGE: "
                f"{format_quantity(e['delay_s'], 's')} AGAINST {format_quantity(sim[edge], 's')} "
                f"({e['model_vs_sim'] * 100:+.1f} %, more than --model-warn "
                f"{model_share * 100:g} %). Every range, the Monte Carlo and the build window come "
                "from the model: check this network in a circuit simulator before trusting them."
            )
        elif abs(e["textbook_vs_sim"]) > model_share:
            warnings.append(
                f"note: the textbook closed form gives {format_quantity(e['delay_textbook_s'], 's')}"
                f" on the {edge} edge, {e['textbook_vs_sim'] * 100:+.1f} % off the simulation; the "
                "ranges use the charge integral, which agrees with it"
            )
    points = slow_edge_over_temperature(net)
    loud_lines = hottest_leakage_warnings(points, warn_share, "simulation")
    loud = bool(loud_lines)
    if not model_warned:
        warnings += loud_lines
    return {
        "method": "TR-BDF2 with Newton, SPICE level-1 diode, typical parts",
        "slow_edge_over_temperature": [
            {"temp_c": p.temp_c, "edge": p.edge, "delay_s": p.delay_s,
             "delay_no_leakage_s": p.delay_no_leakage_s, "leakage_erosion": p.erosion}
            for p in points
        ],
        "leakage_warning": loud,
        "leakage_warn_share": float(warn_share),
        "model_warning": model_off,
        "model_warn_share": model_share,
    }
