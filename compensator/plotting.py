"""The plotting edge: matplotlib on the Agg backend (no screen needed) and atomic PNG writing."""

from __future__ import annotations

import io
from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402

from compensator.fileio import write_file_atomic  # noqa: E402

__all__ = ["plt", "save_figure"]


def save_figure(fig, path, overwrite: bool = False) -> Path:
    """Render ``fig`` as PNG in memory, close it, and write it atomically.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
    path : str or path-like
        Destination file.
    overwrite : bool
        Replace an existing file.

    Returns
    -------
    Path
    """
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=110)
    plt.close(fig)
    return write_file_atomic(path, buf.getvalue(), overwrite=overwrite)
