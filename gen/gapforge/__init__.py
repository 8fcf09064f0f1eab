"""gapforge: dead-time design aid for half bridges.

Data flows one way: inputs (quantities, layout and design files, captures) -> models (layouts,
analog reference, power stage) -> fit (quantization onto timer codes) -> outputs (tables, JSON,
C headers, reports). Only the command line writes files.

The public Python API is the list in `__all__` below, for notebooks and scripts: load a design,
plan its build, fit a dead time onto a layout, render headers, measure a capture. Everything else
lives in the subpackages (`base`, `timer`, `stage`, `analog`, `bench`, `pipeline`, `outputs`,
`cli`) and may change between versions. Names are imported on first use, so `import gapforge`
stays light (no numpy until a name that needs it is touched).
"""

from __future__ import annotations

import importlib
from typing import Any

__version__ = "0.1.0"

# public name -> the module that defines it
_PUBLIC: dict[str, str] = {
    "GapforgeError": "gapforge.base.errors",
    "parse_quantity": "gapforge.base.quantities",
    "parse_tolerance": "gapforge.base.quantities",
    "load_design": "gapforge.pipeline.design",
    "Design": "gapforge.pipeline.design",
    "plan_design": "gapforge.pipeline.build",
    "BuildPlan": "gapforge.pipeline.build",
    "render_headers": "gapforge.outputs.header",
    "load_layout": "gapforge.timer.layouts",
    "Layout": "gapforge.timer.layouts",
    "FitRequest": "gapforge.timer.fit",
    "FitResult": "gapforge.timer.fit",
    "fit": "gapforge.timer.fit",
    "load_capture": "gapforge.bench.capture",
    "measure_capture": "gapforge.bench.measure",
    "Measurement": "gapforge.bench.measure",
}

__all__ = [
    "BuildPlan",
    "Design",
    "FitRequest",
    "FitResult",
    "GapforgeError",
    "Layout",
    "Measurement",
    "__version__",
    "fit",
    "load_capture",
    "load_design",
    "load_layout",
    "measure_capture",
    "parse_quantity",
    "parse_tolerance",
    "plan_design",
    "render_headers",
]

def __getattr__(name: str) -> Any:
    module = _PUBLIC.get(name)
    if module is None:
        raise AttributeError(f"module 'gapforge' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_PUBLIC))
