"""The `analog` command's text: the answer first (worst-case dead times, whether the network can
overlap), then the network, the edges, the tolerance analysis, the findings, the caution."""

from __future__ import annotations

from typing import Any

from gapforge.analog.network import EDGES, PAIR_KEYS
from gapforge.base.display import count, format_range, format_si
from gapforge.base.quantities import format_quantity


def _t(value: float) -> str:
    return format_quantity(value, "s", 4)


def _lo(value: float) -> str:
    """A lower limit (a worst-case minimum), cut down: never shown longer than it is."""
    return format_si(value, "s", toward="down")


def _hi(value: float) -> str:
    """An upper limit (a worst-case maximum), cut up: never shown shorter than it is."""
    return format_si(value, "s", toward="up")


def _pair_text(s: dict[str, Any]) -> str:
    return f"R {format_quantity(s['r_ohm'], 'ohm'):>10}  C {format_quantity(s['c_f'], 'F'):>8}"


def _suggestion_lines(sg: dict[str, Any]) -> list[str]:
    """The preferred pairs: each with its worst-case dead times; unsafe ones named, not offered."""
    floor = (f" and at least --min-dead {_t(sg['min_dead_s'])}"
             if sg["min_dead_s"] is not None else "")
    if sg["window"] is not None:
        window = format_range(sg["window"]["min_s"], sg["window"]["max_s"], "s", cut="nearest")
        head = (f"Preferred pairs whose worst-case {sg['dead_time']} lies inside {window} "
                f"(R from {sg['r_series']}, C from {sg['c_series']}; worst case over all "
                f"tolerances, positive{floor}; best centred first):")
    else:
        ranked = ("the farthest end of the worst-case range from the target"
                  if sg["rank"] == "worst-case" else "the typical error")
        head = (f"Preferred pairs for {sg['dead_time']} = {_t(sg['target_s'])} (R from "
                f"{sg['r_series']}, C from {sg['c_series']}; worst case over all tolerances, "
                f"positive{floor}; ranked by {ranked}):")
    lines = ["", head]
    for s in sg["pairs"]:
        lines.append(
            f"  {_pair_text(s)}  typ {_t(s['typ_s'])}   worst case "
            f"to_high {_lo(s['to_high']['min_s'])} .. {_hi(s['to_high']['max_s'])}   to_low "
            f"{_lo(s['to_low']['min_s'])} .. {_hi(s['to_low']['max_s'])}"
        )
    if not sg["pairs"]:
        lines.append("  none: no candidate is safe" + (" and inside the window"
                                                      if sg["window"] is not None else "")
                     + " (see below)")
    rejected = sg["rejected"]
    if rejected:
        why = "outside the window or UNSAFE" if sg["window"] is not None else "UNSAFE"
        lines.append(
            f"  not proposed, {why}: {len(rejected)} of {sg['candidates']} candidate pairs"
            + (", the best ranked:" if len(rejected) > 3 else ":")
        )
        for s in rejected[:3]:
            lines.append(f"    {_pair_text(s)}  typ {_t(s['typ_s'])}: {'; '.join(s['unsafe'])}")
    return lines


def _suggest_answer(sg: dict[str, Any]) -> str:
    """What --suggest found, in one clause (the first line's answer)."""
    pairs = sg["pairs"]
    if sg["window"] is not None:
        window = format_range(sg["window"]["min_s"], sg["window"]["max_s"], "s", cut="nearest")
        if not pairs:
            return f"no preferred pair gives a worst-case {sg['dead_time']} inside {window}"
        best = pairs[0]
        return (f"{count(len(pairs), 'preferred pair')} give a worst-case {sg['dead_time']} "
                f"inside {window}, best centred R {format_quantity(best['r_ohm'], 'ohm')} "
                f"C {format_quantity(best['c_f'], 'F')}")
    if not pairs:
        return f"no safe preferred pair near {_t(sg['target_s'])}"
    return f"{count(len(pairs), 'safe preferred pair')} near {_t(sg['target_s'])}"


def answer_line(report: dict[str, Any]) -> str:
    """The first line: the verdict, what --suggest and --min-dead asked, the worst-case dead
    times and whether the network can overlap."""
    answers: list[str] = []
    if "suggestions" in report:
        answers.append(_suggest_answer(report["suggestions"]))
    floor = report.get("min_dead_s")
    if floor is not None:
        short = report["below_min_dead"]
        answers.append(
            f"worst-case minimum of {' and '.join(short)} below --min-dead {_t(floor)}" if short
            else f"every worst-case dead time at least --min-dead {_t(floor)}")
    ranges = "; ".join(
        f"{key} {format_range(report[key]['min_s'], report[key]['max_s'], 's', safe=True)}"
        for key in PAIR_KEYS
    )
    if report["can_overlap"]:
        overlap = "CAN OVERLAP: a worst-case dead time is not positive"
    else:
        overlap = "cannot overlap (every worst-case dead time is positive)"
    answers += [f"worst-case dead time {ranges}", f"the network {overlap}"]
    return f"analog: {report['verdict']} - " + "; ".join(answers)


def render_text(report: dict[str, Any]) -> str:
    """The human-facing report: the answer first, the caution last."""
    lines = [answer_line(report), "", "Network (default values are marked *):"]
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
            f"  {edge:<8} ({kind:<9}) typ {_t(e['delay_s'])}   range {_lo(e['min_s'])} .. "
            f"{_hi(e['max_s'])}{sim}"
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
            f"  {key:<8} min {_lo(r['min_s'])}   typ {_t(r['typ_s'])}   max {_hi(r['max_s'])}"
        )
        lines.append(
            f"  {'':<8} statistical estimate (RSS, typ +/- 3 sigma): "
            f"{_lo(rss_row['low_3sigma_s'])} .. {_hi(rss_row['high_3sigma_s'])}"
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
    check = report["worst_case"]
    widened = check["widened_by_check"]
    lines.append(
        f"  corners checked against a {check['check_levels']}-level grid "
        f"({check['check_points']} points a channel)"
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
                f"  {key:<12} min {_lo(s['min_s'])}  0.135 % {_lo(s['p0_135_s'])}  50 % "
                f"{_t(s['p50_s'])}  99.865 % {_hi(s['p99_865_s'])}  max {_hi(s['max_s'])}{share}"
                + ("  [beyond the worst case, see warnings]" if s["beyond_worst_case"] else "")
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
