"""Progress bars only where they can redraw themselves (a terminal, or a notebook with widgets)."""

from __future__ import annotations

import sys


def _in_notebook() -> bool:
    """Whether we run in a Jupyter kernel (IPython with a kernel attached)."""
    shell = sys.modules.get("IPython")
    if shell is None:
        return False
    ip = shell.get_ipython() if hasattr(shell, "get_ipython") else None
    return ip is not None and "IPKernelApp" in getattr(ip, "config", {})


def progress_bar_class():
    """The progress bar that fits where we run, or None for no bar.

    A notebook gets tqdm's widget bar (when ipywidgets is installed; without it a
    text bar would print line after line, so there is none); a terminal gets the
    text bar; anything else (a log file, a pipe, CI) gets none.
    """
    if _in_notebook():
        try:
            import ipywidgets  # noqa: F401
            from tqdm.notebook import tqdm
        except ImportError:
            return None
        return tqdm
    if sys.stderr is not None and sys.stderr.isatty():
        from tqdm import tqdm

        return tqdm
    return None


def progress_bar(enabled: bool, **options):
    """A tqdm bar of the kind :func:`progress_bar_class` picks, or a disabled one."""
    from tqdm import tqdm

    bar = progress_bar_class() if enabled else None
    if bar is None:
        return tqdm(disable=True, **{k: v for k, v in options.items() if k == "total"})
    return bar(**options)


__all__ = ["progress_bar", "progress_bar_class"]
