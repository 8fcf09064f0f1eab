"""The one safety caution every human-facing output carries (text, JSON, headers, reports)."""

from __future__ import annotations

# Wrapped for comments in generated C; TEXT is the same words on one line.
LINES = (
    "CAUTION: a wrong dead time can destroy a power stage and hurt people. gapforge is a design",
    "aid, not a guarantee: verify every dead time on the bench at reduced voltage with current",
    "limiting before full power, on every transition, over temperature and load current. Local",
    "codes and licensed engineering practice prevail.",
)
TEXT = " ".join(LINES)

# The short form printed once per run at the end of terminal output (issue 10); the full TEXT
# stays in the README, headers and reports.
SHORT = (
    "Caution: a design aid only; verify every dead time on the bench at reduced voltage with "
    "current limiting before full power, on every transition, over temperature and load current "
    "(see README)."
)
