"""The timer side: timer dead-time layouts as data and the exact fit onto their codes.

Owns the layout files (`layouts`), quantization of a dead time onto codes at every divider
(`fit`), the PWM edge-case limits of a fit (`limits`) and the layouts x clocks x dividers search
(`sweep`, which judges against a `gapforge.stage` window). Imports only base and stage. Never
imports analog, bench, pipeline, outputs or cli: the fit knows nothing of where a request came from.
"""
