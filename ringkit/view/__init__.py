"""Presentation layer: figures (matplotlib) and Jupyter widget panels (ipywidgets).

This is the only part of ringkit that imports matplotlib or ipywidgets; the submodules are
loaded on first use so that ``import ringkit.view`` stays cheap.

Modules
-------
style
    The single style module (colours, rc settings, axis labels, display units).
plots
    Figure functions over plain arrays; each takes ``ax=None`` and returns the Axes.
panels
    Widget panels (device explorer, size scaling, measured data), each a thin ipywidgets
    shell over plain compute functions.
"""

from __future__ import annotations

import importlib

__all__ = ["style", "plots", "panels"]


def __getattr__(name: str):
    if name in __all__:
        return importlib.import_module(f"ringkit.view.{name}")
    raise AttributeError(f"module 'ringkit.view' has no attribute {name!r}")
