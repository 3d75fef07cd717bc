"""Progress bars over compounds, for campaigns and reports.

A bar is drawn on a terminal, and in a notebook kernel when ipywidgets is there to draw
it; otherwise (quiet runs, logs, pipes, a kernel without ipywidgets) nothing is drawn and
tqdm is not even imported: ``tqdm.auto`` warns (TqdmWarning) on import in a kernel
without ipywidgets, even for a run that asked to be quiet.
"""

from __future__ import annotations

import importlib.util
import sys

__all__ = ["progress_bar"]


class _NoProgress:
    """The bar of a quiet run: nothing drawn, nothing imported."""

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        return False

    def update(self, n=1):
        pass


def progress_bar(total, *, quiet, desc):
    """A context manager with ``update()``: a tqdm bar of ``total`` compounds, or nothing.

    Parameters
    ----------
    total : int
        Compounds to go through.
    quiet : bool
        Draw nothing.
    desc : str
        The bar's label (e.g. "fitting", "report").
    """
    terminal = hasattr(sys.stderr, "isatty") and sys.stderr.isatty()
    notebook = ("ipykernel" in sys.modules
                and importlib.util.find_spec("ipywidgets") is not None)
    if quiet or not (terminal or notebook):
        return _NoProgress()
    if notebook:
        from tqdm.auto import tqdm
    else:
        from tqdm import tqdm
    return tqdm(total=total, unit="compound", desc=desc, leave=False)
