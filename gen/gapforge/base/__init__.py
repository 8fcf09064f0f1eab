"""The base: what every other part stands on.

Owns engineering quantities as exact fractions (`quantities`), TOML reading with allowed keys and
located problems (`schema`), the one user-error type (`errors`), all-or-nothing file writing
(`files`), the caution text (`caution`) and the one display number style (`display`). Never
imports timer, stage, analog, bench, pipeline, outputs or cli, and never numpy or Jinja2.
"""
