"""What sharing costs: an edge moved away from its own best code by a shared divider or field.

A layout may give both edges one divider (split fields, one divider field) or one field (role
"both"). The fit then chooses for the pair, and one edge can end up longer (or, with nearest
rounding, elsewhere) than it would if it had the timer to itself. `compromises` fits each edge
alone (both edges asking for that edge's request, the same rounding and divider choice) and
reports every edge whose achieved nominal dead time differs from that: which edge, by how much,
and why (the divider the other edge needed, or the other edge's longer request on a shared field).
Exact fractions throughout.
"""

from __future__ import annotations

from dataclasses import replace
from fractions import Fraction

from gapforge.base.records import record
from gapforge.timer.fit import FitResult, fit
from gapforge.timer.layouts import EDGES


@record
class Compromise:
    edge: str
    other: str
    achieved_s: Fraction
    best_s: Fraction  # what this edge would get alone
    best_code: int
    best_divider: int
    shared_field: bool  # True: one field serves both edges; False: one divider does

    @property
    def moved_s(self) -> Fraction:
        """achieved - best: positive when the sharing lengthened this edge."""
        return self.achieved_s - self.best_s

    def text(self) -> str:
        direction = "longer" if self.moved_s > 0 else "shorter"
        amount = f"{float(abs(self.moved_s)) * 1e9:.4g} ns {direction}"
        if self.shared_field:
            why = (
                f"one field serves both edges and {self.other}'s longer request sets its code"
            )
        else:
            why = (
                f"the divider is shared, and {self.other} is served better by the chosen divider"
                f" (alone, {self.edge} would take divider {self.best_divider}, code "
                f"{self.best_code}, {float(self.best_s) * 1e9:.4g} ns)"
            )
        return f"{self.edge} is {amount} than its own best code: {why}"


def compromises(result: FitResult, divider_code: int | None = None) -> list[Compromise]:
    """Every edge the sharing moved, in edge order (empty for an unreachable fit)."""
    if not result.ok or result.divider is None:
        return []
    layout = result.layout
    out: list[Compromise] = []
    for edge in EDGES:
        other = next(e for e in EDGES if e != edge)
        shared_field = layout.edge_field(edge) is layout.edge_field(other)
        if not shared_field and len(layout.dividers) < 2:
            continue  # nothing is shared: each edge has its own field and there is one divider
        own = result.request.requested(edge)
        alone = fit(layout, replace(result.request, to_high_s=own, to_low_s=own), divider_code)
        got = result.edges[edge]
        best = alone.edges[edge]
        if not alone.ok or got.achieved_s is None or best.achieved_s is None:
            continue
        if got.achieved_s == best.achieved_s:
            continue
        assert best.code is not None and alone.divider is not None
        out.append(
            Compromise(edge, other, got.achieved_s, best.achieved_s, best.code, alone.divider,
                       shared_field)
        )
    return out
