"""The bench check of the load-indexed table: which edges the table calls soft at a current.

`measure --design D --current 3.2A --node ...` measures the switch node at every turn-on of an
oscilloscope capture (bench.scope); this module answers, from the design's `[adaptive]` table,
which edge the firmware's table calls soft at that operating current (the bin the firmware
selects for |I|, the current's sign choosing the commutated edge; stage.adaptive).
"""

from __future__ import annotations

from fractions import Fraction
from pathlib import Path

from gapforge.base.errors import GapforgeError
from gapforge.pipeline.adaptive_plan import _bin_of


def soft_edges(design: Path, current: Fraction) -> dict[str, bool]:
    """Edge -> True where the design's table calls that edge soft at `current` (amperes,
    positive out of the switch node)."""
    from gapforge.pipeline.build import plan_design
    from gapforge.pipeline.design import load_design

    plan = plan_design(load_design(design))
    tables = [o.adaptive for o in plan.outputs if o.adaptive is not None]
    if not tables:
        raise GapforgeError("--current with --node checks the [adaptive] table: this design "
                            "has none", str(design))
    sign = "positive" if current >= 0 else "negative"
    out: dict[str, bool] = {}
    for adaptive in tables:
        entries = _bin_of(adaptive.table, current).entries[sign]
        for edge, entry in entries.items():
            out[edge] = out.get(edge, False) or bool(entry.soft)
    return out
