"""`gapforge analog`: what the RC-diode-Schmitt reference network really delivers.

Every part of the network is an option (engineering notation, min:typ:max where it varies), or
`--design FILE` reads the design's `[reference]` section (options given as well override it).
The options are generated from `analog.PARAMETERS`, the same table the design file uses.
numpy is imported only inside the command function.
"""

from __future__ import annotations

import json
import sys
import warnings
from collections.abc import Callable
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
        default = p.default if p.default else "derived"
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
              help="Propose preferred-value R/C pairs for this typical dead time.")
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
    target = parse_quantity(suggest_t, "s", "--suggest") if suggest_t is not None else None
    report = analyse(
        net,
        simulate=simulate,
        samples=samples,
        seed=seed,
        distribution=distribution,
        sigma_band=sigma_band,
        below=below,
        warn_share=warn_share,
        model_share=model_share,
        target=target,
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


def analyse(
    net: ReferenceNetwork,
    *,
    simulate: bool = False,
    samples: int | None = None,
    seed: int = 1,
    distribution: str = "uniform",
    sigma_band: float = 3.0,
    below: Fraction | None = None,
    warn_share: Fraction = DEFAULT_LEAKAGE_SHARE,
    model_share: Fraction = Fraction(1, 10),
    target: Fraction | None = None,
    suggest_for: str = "to_high",
    suggest_rank: str = "worst-case",
    r_series: str = "E96",
    c_series: str = "E12",
) -> dict[str, Any]:
    """Everything `analog` reports, as a JSON-ready dict (floats for display only)."""
    from gapforge.analog.describe import bypass_notes, describe_parameters
    from gapforge.analog.findings import (
        coupling_finding,
        default_diode_note,
        hottest_leakage_warnings,
        overlap_finding,
        slow_edge_coupling,
        slow_edge_leakage,
    )
    from gapforge.analog.tolerance import monte_carlo, rss, typical_textbook, worst_case

    wc = worst_case(net)
    warnings: list[str] = []
    edges: dict[str, Any] = {}
    notes = bypass_notes(net)
    textbook = typical_textbook(net)
    for edge in EDGES:
        lo, typ, hi = wc.floats["node_" + edge]
        clo, ctyp, chi = wc.floats[edge]
        edges[edge] = {
            "bypassed": net.bypass == edge,
            "model": "rc closed form" if net.bypass == "none" else "charge integral",
            "delay_s": typ,
            "delay_textbook_s": textbook["node_" + edge],
            "min_s": lo,
            "max_s": hi,
            "channel": _range(clo, ctyp, chi),
        }
        if edge in notes:
            edges[edge]["note"] = notes[edge]
    report: dict[str, Any] = {
        "caution": CAUTION,
        "parameters": {
            name: {"value": text, "default": is_default, "source": source}
            for name, text, is_default, source in describe_parameters(net)
        },
        "edges": edges,
        "worst_case": {
            "method": "every min/typ/max corner, checked against a seeded Monte Carlo",
            "check_samples": wc.check_samples,
            "widened_by_monte_carlo": list(wc.widened),
        },
    }
    limit_violated = False
    for key in PAIR_KEYS:
        rng = wc.pair[key]
        report[key] = {
            "min_s": float(rng.min_s),
            "typ_s": float(rng.typ_s),
            "max_s": float(rng.max_s),
            "min_ps": int(rng.min_s * 10**12),
            "max_ps": int(rng.max_s * 10**12),
        }
        overlap = overlap_finding(net, key, rng)
        if overlap is not None:
            limit_violated = True
            warnings.append(overlap)
        if below is not None and rng.min_s < below:
            limit_violated = True
            warnings.append(
                f"{key}: the worst-case minimum {format_quantity(rng.min_s, 's')} is below "
                f"--min-dead {format_quantity(below, 's')}"
            )
    # the same findings, in the same words, as analog.reference_findings gives every build
    leakage_points = slow_edge_leakage(net)
    leakage = hottest_leakage_warnings(leakage_points, warn_share, "model")
    warnings += leakage
    coupling_points = slow_edge_coupling(net)
    coupling = coupling_finding(net, coupling_points, warn_share)
    if coupling is not None:
        warnings.append(coupling)
    warnings += [notes[e] for e in EDGES if e in notes]
    diode_note = default_diode_note(net)
    if diode_note is not None:
        warnings.append(diode_note)
    limit_violated = limit_violated or bool(leakage)
    report["coupling"] = {
        "method": "charge-integral model, typical parts, with and without the diode's junction "
        "capacitance",
        "slow_edge_over_temperature": [
            {"temp_c": p.temp_c, "edge": p.edge, "delay_s": p.delay_s,
             "delay_no_cj_s": p.delay_no_cj_s, "share": p.share}
            for p in coupling_points
        ],
        "warning": coupling is not None,
        "warn_share": float(warn_share),
    }
    report["leakage"] = {
        "method": "charge-integral model, typical parts, with and without the diode's leakage",
        "slow_edge_over_temperature": [
            {"temp_c": p.temp_c, "edge": p.edge, "delay_s": p.delay_s,
             "delay_no_leakage_s": p.delay_no_leakage_s, "leakage_erosion": p.erosion}
            for p in leakage_points
        ],
        "warning": bool(leakage),
        "warn_share": float(warn_share),
    }
    sums = rss(net, distribution, sigma_band)
    report["rss"] = {
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
    if samples is not None:
        mc = monte_carlo(
            net, samples, seed=seed, distribution=distribution, sigma_band=sigma_band,
            below_s=below,
        )
        report["monte_carlo"] = {
            "samples": mc.samples,
            "seed": mc.seed,
            "distribution": mc.distribution,
            "sigma_band": mc.sigma_band if distribution == "normal" else None,
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
                }
                for key, s in mc.stats.items()
            },
        }
    if simulate:
        report["simulation"] = _simulation(net, warn_share, float(model_share), edges, warnings,
                                           bool(leakage))
        limit_violated = limit_violated or report["simulation"]["leakage_warning"]
    if target is not None:
        from gapforge.analog.preferred import suggest

        found = suggest(net, target, key=suggest_for, r_series=r_series, c_series=c_series,
                        rank=suggest_rank, min_dead_s=below)
        report["suggestions"] = {
            "target_s": float(target),
            "dead_time": suggest_for,
            "r_series": r_series,
            "c_series": c_series,
            "rank": found.rank,
            "min_dead_s": float(below) if below is not None else None,
            "candidates": found.candidates,
            "pairs": [_suggestion(s) for s in found.pairs],
            "rejected": [_suggestion(s) for s in found.rejected],
        }
        if not found.pairs:
            limit_violated = True
            warnings.append(
                f"--suggest: none of the {found.candidates} preferred pairs near "
                f"{format_quantity(target, 's')} is safe over the tolerances (every one's "
                "worst-case dead time is not positive"
                + (" or below --min-dead" if below is not None else "") + ")"
            )
    report["warnings"] = warnings
    report["limit_violated"] = limit_violated
    return report


def _suggestion(s: Any) -> dict[str, Any]:
    """One preferred pair as JSON (a preferred.Suggestion)."""
    return {
        "r_ohm": float(s.r),
        "c_f": float(s.c),
        "typ_s": s.typ_s,
        "error": s.error,
        "worst_error": s.worst_error,
        "safe": s.safe,
        "unsafe": list(s.unsafe),
        **{k: {"min_s": float(v.min_s), "typ_s": float(v.typ_s), "max_s": float(v.max_s)}
           for k, v in s.ranges.items()},
    }


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


def _t(value: float) -> str:
    return format_quantity(value, "s", 4)


def _pair_text(s: dict[str, Any]) -> str:
    return f"R {format_quantity(s['r_ohm'], 'ohm'):>10}  C {format_quantity(s['c_f'], 'F'):>8}"


def _suggestion_lines(sg: dict[str, Any]) -> list[str]:
    """The preferred pairs: each with its worst-case dead times; unsafe ones named, not offered."""
    ranked = ("the farthest end of the worst-case range from the target"
              if sg["rank"] == "worst-case" else "the typical error")
    floor = (f" and at least --min-dead {_t(sg['min_dead_s'])}"
             if sg["min_dead_s"] is not None else "")
    lines = [
        "",
        f"Preferred pairs for {sg['dead_time']} = {_t(sg['target_s'])} (R from {sg['r_series']}, "
        f"C from {sg['c_series']}; worst case over all tolerances, positive{floor}; ranked by "
        f"{ranked}):",
    ]
    for s in sg["pairs"]:
        lines.append(
            f"  {_pair_text(s)}  typ {_t(s['typ_s'])} ({s['error'] * 100:+.2f} %)   worst case "
            f"to_high {_t(s['to_high']['min_s'])} .. {_t(s['to_high']['max_s'])}   to_low "
            f"{_t(s['to_low']['min_s'])} .. {_t(s['to_low']['max_s'])}"
        )
    if not sg["pairs"]:
        lines.append("  none: every candidate is unsafe (see below)")
    rejected = sg["rejected"]
    if rejected:
        lines.append(
            f"  not proposed, UNSAFE: {len(rejected)} of {sg['candidates']} candidate pairs"
            + (", the best ranked:" if len(rejected) > 3 else ":")
        )
        for s in rejected[:3]:
            lines.append(
                f"    {_pair_text(s)}  typ {_t(s['typ_s'])} ({s['error'] * 100:+.2f} %): "
                f"{'; '.join(s['unsafe'])}"
            )
    return lines


def render_text(report: dict[str, Any]) -> str:
    """The human-facing report (the caution first and last)."""
    lines = [report["caution"], "", "Network (default values are marked *):"]
    for name, row in report["parameters"].items():
        mark = "*" if row["default"] else " "
        src = f"  ({row['source']})" if row["default"] and row["source"] else ""
        lines.append(f"  {mark} {name:<15} {row['value']}{src}")
    lines += ["", "Node delays (ideal input step to the Schmitt threshold):"]
    for edge in EDGES:
        e = report["edges"][edge]
        kind = "bypassed" if e["bypassed"] else "through R"
        sim = (f"   simulated {_t(e['delay_sim_s'])} ({e['model_vs_sim'] * 100:+.2f} %)"
               if "delay_sim_s" in e else "")
        lines.append(
            f"  {edge:<8} ({kind:<9}) typ {_t(e['delay_s'])}   range {_t(e['min_s'])} .. "
            f"{_t(e['max_s'])}{sim}"
        )
    model = report["edges"][EDGES[0]]["model"]
    if model == "rc closed form":
        lines.append(f"  model: {model}")
    else:
        textbook = ", ".join(f"{edge} {_t(report['edges'][edge]['delay_textbook_s'])}"
                             for edge in EDGES)
        lines.append(f"  model: {model}; textbook closed form {textbook} (not used for ranges: "
                     "it treats the diode as a switch)")
    lines += ["", "Dead times of the complementary pair (worst case over all tolerances):"]
    beyond = []
    for key in PAIR_KEYS:
        r = report[key]
        rss_row = report["rss"][key]
        lines.append(
            f"  {key:<8} min {_t(r['min_s'])}   typ {_t(r['typ_s'])}   max {_t(r['max_s'])}"
        )
        lines.append(
            f"  {'':<8} statistical estimate (RSS, typ +/- 3 sigma): "
            f"{_t(rss_row['low_3sigma_s'])} .. {_t(rss_row['high_3sigma_s'])}"
            + ("  [beyond the worst case, see note]" if rss_row["beyond_worst_case"] else "")
        )
        if rss_row["beyond_worst_case"]:
            beyond.append(key)
    if beyond:
        lines.append(
            f"  note: for {', '.join(beyond)} the RSS 3-sigma interval reaches beyond the "
            "worst-case corners. That is expected when a few uniform tolerance bands dominate: "
            "a uniform band of half-width a has sigma a/sqrt(3) (GUM 4.3.7), so 3 sigma is 1.73 a,"
            " past the band's own ends. The worst case is the bound; RSS is only an estimate "
            "(nothing is clipped)."
        )
    widened = report["worst_case"]["widened_by_monte_carlo"]
    lines.append(
        "  corners checked against "
        f"{report['worst_case']['check_samples']} Monte Carlo samples"
        + (f"; widened for {', '.join(widened)} (non-monotonic)" if widened else "; none beyond them")
    )
    if "monte_carlo" in report:
        mc = report["monte_carlo"]
        lines += ["", f"Monte Carlo ({mc['samples']} samples, {mc['distribution']}, seed {mc['seed']}):"]
        for key, s in mc["results"].items():
            share = (
                f"   below {_t(mc['below_s'])}: {s['share_below'] * 100:.4g} %"
                if s["share_below"] is not None else ""
            )
            lines.append(
                f"  {key:<12} min {_t(s['min_s'])}  0.135 % {_t(s['p0_135_s'])}  50 % "
                f"{_t(s['p50_s'])}  99.865 % {_t(s['p99_865_s'])}  max {_t(s['max_s'])}{share}"
            )
    leak = report["leakage"]
    if leak["slow_edge_over_temperature"]:
        hottest = max(p["temp_c"] for p in leak["slow_edge_over_temperature"])
        lines += ["", f"Diode leakage at the hottest temperature (model, typical parts; warn above "
                  f"{leak['warn_share'] * 100:g} %):"]
        for p in leak["slow_edge_over_temperature"]:
            if p["temp_c"] == hottest:
                lines.append(
                    f"  {p['edge']:<8} {p['temp_c']:>6g} C  {_t(p['delay_s'])}  (without leakage "
                    f"{_t(p['delay_no_leakage_s'])}, leakage takes "
                    f"{p['leakage_erosion'] * 100:.1f} %)"
                )
    if "simulation" in report:
        lines += ["", "Slow edge over temperature (simulated, typical parts):"]
        for p in report["simulation"]["slow_edge_over_temperature"]:
            lines.append(
                f"  {p['edge']:<8} {p['temp_c']:>6g} C  {_t(p['delay_s'])}  (without leakage "
                f"{_t(p['delay_no_leakage_s'])}, leakage takes {p['leakage_erosion'] * 100:.1f} %)"
            )
    if "suggestions" in report:
        lines += _suggestion_lines(report["suggestions"])
    if report["warnings"]:
        lines.append("")
        lines += [f"! {w}" for w in report["warnings"]]
    lines += ["", report["caution"], ""]
    return "\n".join(lines)
