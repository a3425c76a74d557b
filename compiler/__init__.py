"""histosol: greenhouse-gas inventory of drained and rewetted organic soils.

The Python API: :func:`compile_inventory` returns an :class:`InventoryResult`
holding the result tables as pandas DataFrames; ``result.write(folder)``
writes every output.
"""

__version__ = "0.1.0"

from .pipeline import InventoryResult, check_inventory, compile_inventory  # noqa: E402

__all__ = ["compile_inventory", "check_inventory", "InventoryResult", "__version__"]
