"""`analog --suggest`: reading the option (a typical dead time, or a window MIN:MAX) and the
preferred R/C pairs it asks for, as JSON-ready data (split from `analog_cmd`)."""

from __future__ import annotations

from fractions import Fraction
from typing import Any

from gapforge.analog.network import ReferenceNetwork
from gapforge.base.display import format_range
from gapforge.base.errors import GapforgeError
from gapforge.base.quantities import format_quantity, parse_quantity


def suggest_arg(text: str | None) -> tuple[Fraction | None, tuple[Fraction, Fraction] | None]:
    """--suggest: a typical dead time, or a window MIN:MAX (0 < MIN < MAX)."""
    if text is None:
        return None, None
    if ":" not in text:
        return parse_quantity(text, "s", "--suggest"), None
    low_text, _, high_text = text.partition(":")
    low = parse_quantity(low_text, "s", "--suggest")
    high = parse_quantity(high_text, "s", "--suggest")
    if not low < high:
        raise GapforgeError(f"{text!r}: the window's MIN must be below its MAX (e.g. "
                            "114ns:300ns)", "--suggest")
    return None, (low, high)


def suggest_step(net: ReferenceNetwork, opts: Any, out: Any) -> None:
    """Preferred R/C pairs for the wanted dead time (or whose worst case fits the wanted
    window); none safe is a violated limit."""
    from gapforge.analog.preferred import suggest, suggest_window

    if opts.window is not None:
        found = suggest_window(net, *opts.window, key=opts.suggest_for, r_series=opts.r_series,
                               c_series=opts.c_series, min_dead_s=opts.below)
    else:
        assert opts.target is not None
        found = suggest(net, opts.target, key=opts.suggest_for, r_series=opts.r_series,
                        c_series=opts.c_series, rank=opts.suggest_rank, min_dead_s=opts.below)
    out.data["suggestions"] = {
        "target_s": float(opts.target) if opts.target is not None else None,
        "window": None if opts.window is None else {
            "min_s": float(opts.window[0]), "max_s": float(opts.window[1])},
        "dead_time": opts.suggest_for,
        "r_series": opts.r_series,
        "c_series": opts.c_series,
        "rank": found.rank,
        "min_dead_s": float(opts.below) if opts.below is not None else None,
        "candidates": found.candidates,
        "pairs": [_suggestion(s) for s in found.pairs],
        "rejected": [_suggestion(s) for s in found.rejected],
    }
    if not found.pairs:
        out.limit_violated = True
        if opts.window is not None:
            out.warnings.append(
                f"--suggest: none of the {found.candidates} preferred pairs tried gives a "
                f"worst-case {opts.suggest_for} inside "
                f"{format_range(opts.window[0], opts.window[1], 's', cut='inward')}"
                + (" with every dead time at least --min-dead" if opts.below is not None else "")
            )
            return
        assert opts.target is not None
        out.warnings.append(
            f"--suggest: none of the {found.candidates} preferred pairs near "
            f"{format_quantity(opts.target, 's')} is safe over the tolerances (every one's "
            "worst-case dead time is not positive"
            + (" or below --min-dead" if opts.below is not None else "") + ")"
        )


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
