"""The power stage: the dead-time window a half bridge needs, and what dead time costs.

Owns the stage description, the window (minimum from delays, skews and margins; maximum from
losses and distortion) with its per-term breakdown, the costs of a dead time, and judging a dead
time against the window (`window`). Imports only base. Never imports timer, analog, bench,
pipeline, outputs or cli.
"""
