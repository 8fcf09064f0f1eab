"""gapforge: dead-time design aid for half bridges.

Data flows one way: inputs (quantities, layout and design files, captures) -> models (layouts,
analog reference, power stage) -> fit (quantization onto timer codes) -> outputs (tables, JSON,
C headers, reports). Only the CLI layer writes files.
"""

__version__ = "0.1.0"
