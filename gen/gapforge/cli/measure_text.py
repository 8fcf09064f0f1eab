"""What `gapforge measure` prints: the text view (the answer first) and the JSON document.

The first line is the answer: the verdict (`ok`, `fail`, `inconclusive`) and the shortest gap of
each edge; a measured overlap follows at once with its time stamps. Then the reasons, the
capture, the per-edge table, the timing diagram, the findings, and the short caution once at
the end. Display numbers use `base.display` (four significant digits, one prefix per line);
the JSON keeps exact values as floats of seconds and the full caution.
"""

from __future__ import annotations

from fractions import Fraction
from typing import TYPE_CHECKING, Any

from gapforge.base import caution
from gapforge.base.display import count, format_many, format_si

if TYPE_CHECKING:
    from gapforge.bench.measure import EdgeStats, Measurement
    from gapforge.bench.serial_stream import SerialResult

EDGE_NAMES = ("to_high", "to_low")


def _q(value: Fraction | float | None) -> str:
    return "-" if value is None else format_si(value, "s")


def _gap(text: str, value: Fraction | None) -> str:
    """A shortest gap as words: a negative gap is an overlap of that length."""
    if value is None:
        return "none measured"
    if value < 0:
        return f"{text.lstrip('-')} overlap"
    return text


# what an ok without a window (or design) proves: the capture showed no overlap, nothing more
NOT_JUDGED = "no overlap seen; no window given, so the dead time itself was not judged"


def judged(m: Measurement) -> str:
    """What the verdict judged (JSON `judged`): the overlaps only, or the window as well."""
    return "overlaps and window" if m.window_judged else "overlaps only"


def answer_line(m: Measurement) -> str:
    """The verdict and the shortest gap of each edge (one prefix for both)."""
    mins = [m.edge(name).min_s for name in EDGE_NAMES]
    known = [abs(v) for v in mins if v is not None]
    texts = format_many(known, "s") if known else []
    shown = []
    for name, value in zip(EDGE_NAMES, mins, strict=True):
        text = texts.pop(0) if value is not None else ""
        shown.append(f"{name} {_gap(text, value)}")
    head = f"{m.verdict}: "
    if not m.window_judged and m.verdict == "ok":  # issue 19: say what the ok proves
        head += f"{NOT_JUDGED}; "
    if m.overlaps:
        head += f"{count(len(m.overlaps), 'overlap')} (both gates on); "
    return head + "shortest gap " + ", ".join(shown)


def measurement_diagram(m: Measurement, ascii_only: bool = False) -> str:
    """The pair drawn with the shortest measured gap of each edge, over the measured mean
    period when known (a sketch to look at; the numbers above are the measurement)."""
    from gapforge.outputs.diagram import pair_diagram

    to_high, to_low = m.to_high.min_s, m.to_low.min_s
    if to_high is None or to_low is None:
        missing = "to_high" if to_high is None else "to_low"
        return f"(no timing diagram: no {missing} transitions measured)"
    # a shoot-through is never drawn as a dead time: no picture, and why
    shown = [f"{name} {_gap(format_si(abs(v), 's'), v) if v < 0 else 'no dead time (0 s)'}"
             for name, v in (("to_high", to_high), ("to_low", to_low)) if v <= 0]
    if shown:
        return ("(no timing diagram: the shortest gap is not a dead time - "
                + "; ".join(shown) + ": both gates on, see the overlaps above)")
    text = pair_diagram(to_high, to_low, m.mean_period_s, ascii_only=ascii_only)
    lines = ["Timing (shortest measured gaps"
             + (f", mean period {_q(m.mean_period_s)}):" if m.mean_period_s else "):"), text]
    return "\n".join(lines)


def _overlap_lines(m: Measurement) -> list[str]:
    lines = []
    if m.overlaps:
        lines.append(f"OVERLAPS (shoot-through, both gates on): {len(m.overlaps)}")
        for o in m.overlaps[:10]:
            lines.append(f"  both gates on at {_q(o.at_s)} for {_q(o.duration_s)}")
    if m.possible_overlaps:
        lines.append(f"POSSIBLE OVERLAPS (one gate x/z, the other on or unknown): "
                     f"{len(m.possible_overlaps)}")
        for o in m.possible_overlaps[:10]:
            lines.append(f"  unknown gate level at {_q(o.at_s)} for {_q(o.duration_s)}")
    return lines


def _capture_lines(m: Measurement, stream: SerialResult | None) -> list[str]:
    lines = [f"Capture: {m.source} (tick {_q(m.tick_s)}, {_q(m.duration_s)} long)",
             f"Resolution: {_q(m.resolution_s)}, from {m.resolution_origin or 'one tick'}"]
    if stream is not None:
        s = stream.status
        lines.append(f"Stream stopped: {stream.stop_reason}; {count(s.transitions, 'transition')}, "
                     f"{count(s.edges, 'edge')}, {count(s.lines, 'line')}, "
                     f"{s.garbage} undecodable, {s.partial} partial, {s.lost_lines} lost")
    lines += [f"Warning: {warning}" for warning in m.warnings]
    return lines


def _row(name: str, st: EdgeStats, window: str) -> str:
    values = [st.min_s, st.mean_s, st.max_s, st.std_s]
    known = [v for v in values if v is not None]
    texts = iter(format_many(known, "s")) if known else iter(())
    cells = [next(texts) if v is not None else "-" for v in values]
    return (f"{name:<8} {st.count:>8} {cells[0]:>11} {cells[1]:>11} {cells[2]:>11} "
            f"{cells[3]:>11}  {window}")


def _edge_lines(m: Measurement) -> list[str]:
    lines = [f"{'edge':<8} {'count':>8} {'min':>11} {'mean':>11} {'max':>11} {'std':>11}  window"]
    for name in EDGE_NAMES:
        lim = m.limits.get(name)
        win = "-" if lim is None or (lim.window_min_s is None and lim.window_max_s is None) else (
            f"{_q(lim.window_min_s)} .. {_q(lim.window_max_s)}")
        lines.append(_row(name, m.edge(name), win))
    for name in EDGE_NAMES:
        st = m.edge(name)
        if st.percentiles:
            text = ", ".join(f"p{p:g} {_q(v)}" for p, v in st.percentiles)
            lines.append(f"{name} percentiles: {text}")
        if st.shortest:
            worst = ", ".join(f"{_q(i.gap_s)} at {_q(i.at_s)}" for i in st.shortest)
            lines.append(f"{name} shortest: {worst}")
        if st.below_window:
            lines.append(f"{name}: {count(st.below_window, 'gap')} not proven above the window "
                         f"minimum by the resolution ({_q(m.resolution_s)})")
        if st.above_window:
            lines.append(f"{name}: {count(st.above_window, 'gap')} not proven below the window "
                         f"maximum by the resolution ({_q(m.resolution_s)})")
    if m.limits_source:
        lines.append(f"Compared with: {m.limits_source}")
    if m.window_judged:
        lines.append(f"Judged with the resolution {_q(m.resolution_s)}: a gap passes only if "
                     "gap - resolution >= min and gap + resolution <= max.")
    return lines


def _finding_lines(m: Measurement) -> list[str]:
    lines = [f"Glitches: {m.glitch_count}; missing edges: {m.missing_edge_count}"]
    for g in m.glitches[:5]:
        kind = "on-pulse" if g.level == 1 else "off-pulse"
        where = ", inside a dead time" if g.in_dead_time else ""
        lines.append(f"  glitch ({kind}) on the {g.signal} side at {_q(g.at_s)}, "
                     f"{_q(g.width_s)} wide{where}")
    for f in m.missing_edges[:5]:
        lines.append(f"  at {_q(f.at_s)}: {f.text}")
    lines += [f"Note: {note}" for note in m.notes]
    return lines


def measurement_text(m: Measurement, stream: SerialResult | None = None, *, diagram: bool = True,
                     ascii_only: bool = False) -> str:
    lines = [answer_line(m)]
    lines += [f"  {reason}" for reason in m.reasons]
    lines += _overlap_lines(m)
    lines.append("")
    lines += _capture_lines(m, stream)
    lines.append("")
    lines += _edge_lines(m)
    lines.append("")
    if diagram:
        lines += [measurement_diagram(m, ascii_only), ""]
    lines += _finding_lines(m)
    lines.append(caution.SHORT)
    return "\n".join(lines)


def _f(value: Fraction | None) -> float | None:
    return None if value is None else float(value)


def _median(stats: EdgeStats) -> float | None:
    """The median gap in seconds (numpy's linear percentile 50), whatever --percentiles asks."""
    import numpy as np

    if not stats.count:
        return None
    return float(np.percentile(stats.gaps_ticks, 50)) * float(stats.tick_s)


def _edge_json(m: Measurement, name: str) -> dict[str, Any]:
    stats = m.edge(name)
    lim = m.limits.get(name)
    return {
        "count": stats.count,
        "min_s": _f(stats.min_s),
        "max_s": _f(stats.max_s),
        "mean_s": stats.mean_s,
        "std_s": stats.std_s,
        "p50_s": _median(stats),
        "percentiles_s": {f"p{p:g}": v for p, v in stats.percentiles},
        "histogram": {"edges_s": list(stats.histogram_edges_s),
                      "counts": list(stats.histogram_counts)},
        "shortest": [{"at_s": float(i.at_s), "gap_s": float(i.gap_s)} for i in stats.shortest],
        "longest": [{"at_s": float(i.at_s), "gap_s": float(i.gap_s)} for i in stats.longest],
        "below_window": stats.below_window,
        "above_window": stats.above_window,
        "window_min_s": _f(lim.window_min_s) if lim else None,
        "window_max_s": _f(lim.window_max_s) if lim else None,
        "predicted_min_s": _f(lim.predicted_min_s) if lim else None,
        "predicted_max_s": _f(lim.predicted_max_s) if lim else None,
    }


def measurement_json(m: Measurement, stream: SerialResult | None = None) -> dict[str, Any]:
    doc: dict[str, Any] = {
        "verdict": m.verdict,
        "window_judged": m.window_judged,
        "judged": judged(m),
        "source": m.source,
        "tick_s": float(m.tick_s),
        "resolution_s": float(m.resolution_s),
        "resolution_origin": m.resolution_origin,
        "limits_source": m.limits_source,
        "duration_s": float(m.duration_s),
        "edges": {name: _edge_json(m, name) for name in EDGE_NAMES},
        "overlaps": len(m.overlaps),
        "overlap_events": [{"at_s": float(o.at_s), "duration_s": float(o.duration_s)}
                           for o in m.overlaps[:100]],
        "possible_overlaps": len(m.possible_overlaps),
        "possible_overlap_events": [{"at_s": float(o.at_s), "duration_s": float(o.duration_s)}
                                    for o in m.possible_overlaps[:100]],
        "glitches": m.glitch_count,
        "glitch_events": [{"signal": g.signal, "level": g.level, "at_s": float(g.at_s),
                           "width_s": float(g.width_s), "in_dead_time": g.in_dead_time}
                          for g in m.glitches[:100]],
        "missing_edges": m.missing_edge_count,
        "missing_edge_events": [{"at_s": float(f.at_s), "text": f.text}
                                for f in m.missing_edges[:100]],
        "unknown_intervals": m.unknown_intervals,
        "reasons": list(m.reasons),
        "notes": list(m.notes),
        "warnings": list(m.warnings),
    }
    if stream is not None:
        s = stream.status
        doc["stream"] = {"stop_reason": stream.stop_reason, "lines": s.lines, "edges": s.edges,
                         "transitions": s.transitions,
                         "garbage": s.garbage, "corrupt": s.corrupt, "partial": s.partial,
                         "lost_lines": s.lost_lines, "reordered": s.reordered,
                         "clock_hz": s.clock_hz, "counter_bits": s.counter_bits,
                         "elapsed_s": s.elapsed_s}
    doc["caution"] = caution.TEXT
    return doc
