"""The pipeline: a design file to a build plan.

Owns the design file (`design`: timer, PWM, dead-time policy, reference, stage, outputs) and the
one function that turns it into fitted outputs with verdicts (`build`). Imports base, timer,
stage and analog. Never imports bench, outputs or cli: it computes, it never renders or writes.
"""
