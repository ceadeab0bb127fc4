"""Recalculation engine for carbon-removal monitoring claims.

The package is a library first: :func:`verify.workbook.load_workbook` imports
and validates a workbook, :func:`verify.engine.run` returns one result object,
and the JSON, results workbook and PDF are views of that object.
"""

__version__ = "0.1.0"
TOOL_NAME = "carbon-verify"
