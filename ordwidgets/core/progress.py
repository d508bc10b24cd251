"""One status line for long fits: updated in place in a notebook, optional elsewhere.

The core stays free of widget code: in a Jupyter kernel the line is an IPython display
updated through its display id; outside a kernel it is written to standard error only when
asked for.  Any callable taking a string can serve as the sink instead (tests use a list).
"""
from __future__ import annotations

import sys
import time

import numpy as np

__all__ = ["FitProgress", "progress_for"]


class FitProgress:
    """Show the stage and Newton iterations of a fit.

    Parameters
    ----------
    sink : callable or None
        ``sink(text)`` receives every new status line; ``None`` shows nothing.
    callback : callable, optional
        User callback ``callback(iteration, params, loglik, grad)`` called after the line
        is shown (it may raise ``KeyboardInterrupt`` to stop the fit).
    prefix : str
        Text put before every line (for example the number of rows).
    """

    def __init__(self, sink=None, callback=None, prefix=""):
        self.sink = sink
        self.callback = callback
        self.prefix = prefix
        self.started = time.perf_counter()
        self.last = ""

    def show(self, text):
        """Replace the status line by ``prefix + text`` (with the elapsed time)."""
        self.last = f"{self.prefix}{text} · {time.perf_counter() - self.started:.1f} s"
        if self.sink is not None:
            self.sink(self.last)

    def __call__(self, iteration, params, loglik, grad):
        """Newton callback: iteration, log-likelihood and largest absolute gradient."""
        big = float(np.max(np.abs(grad), initial=0.0))
        self.show(f"Newton step {iteration}: log-likelihood {loglik:.8g}, largest score {big:.3g}")
        if self.callback is not None:
            self.callback(iteration, params, loglik, grad)


def _in_kernel():
    try:
        from IPython import get_ipython
    except ImportError:
        return False
    shell = get_ipython()
    return shell is not None and hasattr(shell, "kernel")


def _notebook_sink():
    from IPython.display import display

    handle = display({"text/plain": ""}, raw=True, display_id=True)
    return lambda text: handle.update({"text/plain": text}, raw=True)


def _stderr_sink(text):
    print(text, file=sys.stderr, flush=True)


def progress_for(progress, callback=None, prefix=""):
    """Build the :class:`FitProgress` asked for by ``progress=``.

    Parameters
    ----------
    progress : {"auto", True, False} or callable
        ``"auto"`` shows the line in a notebook only; ``True`` also on standard error
        outside a notebook; ``False`` never; a callable is used as the sink.
    """
    if callable(progress):
        sink = progress
    elif progress is False or progress is None:
        sink = None
    elif _in_kernel():
        sink = _notebook_sink()
    elif progress is True:
        sink = _stderr_sink
    elif progress == "auto":
        sink = None
    else:
        raise ValueError(f"progress must be 'auto', True, False or a callable, got {progress!r}")
    return FitProgress(sink, callback, prefix)
