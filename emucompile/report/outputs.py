"""A verification's files: ``verification.json``, the HTML report and the figures' PNGs.

The step after :func:`emucompile.verify.run.verify_bundle` (or ``verify_gains``):
:func:`write_outputs` takes the :class:`emucompile.verify.run.Verification` and
writes what the command line writes, where it writes it (see "Where the files
go" in :mod:`emucompile.verify.run`). Verify itself writes nothing.
"""

from __future__ import annotations

import json
from pathlib import Path

from emucompile._lazy import LazyModule
from emucompile.bundle import atomic
from emucompile.errors import InputError
from emucompile.report.html import write_report
from emucompile.verify.run import default_output_directory

report_figures = LazyModule("emucompile.report.figures")  # matplotlib: only when figures are drawn

JSON_NAME = "verification.json"
REPORT_NAME = "report.html"


def write_outputs(verification, *, directory=None, report_file=None, plots: bool = True) -> list[Path]:
    """Write ``verification.json``, the HTML report and (in a directory) the figures' PNGs.

    Parameters
    ----------
    directory : path, optional
        Write ``report.html``, ``verification.json`` and ``figure-NN.png`` here.
    report_file : path, optional
        Write the HTML report to this file and ``STEM.verification.json`` beside it.
    plots : bool
        Draw the figures (``--no-plots`` turns them off).

    Returns
    -------
    list of Path
        The files written.
    """
    if report_file is not None:
        report_path = Path(report_file)
        json_path = report_path.with_name(report_path.stem + ".verification.json")
        figure_dir = None
    else:
        directory = Path(directory)
        if directory.is_symlink() or (directory.exists() and not directory.is_dir()):
            # a bundle from elsewhere may carry verification -> somewhere else: never written through
            raise InputError(f"{directory}: is a symbolic link or not a directory; the report is not written there",
                             hint="remove it, or give --report FILE")
        directory.mkdir(parents=True, exist_ok=True)
        report_path, json_path, figure_dir = directory / REPORT_NAME, directory / JSON_NAME, directory
    figures = []
    written = []
    if plots:
        figures = report_figures.make_figures(verification)
    if figure_dir is not None:
        for old in figure_dir.glob("figure-*.png"):
            old.unlink()
        for index, (_, png) in enumerate(figures, start=1):
            target = figure_dir / f"figure-{index:02d}.png"
            _write_atomic(target, png)
            written.append(target)
    report_path.parent.mkdir(parents=True, exist_ok=True)
    write_report(verification, figures, report_path)
    written.append(report_path)
    json_path.parent.mkdir(parents=True, exist_ok=True)
    _write_atomic(json_path, (json.dumps(verification.to_dict(), indent=2, allow_nan=False) + "\n").encode())
    written.append(json_path)
    return written


def _write_atomic(path: Path, data: bytes) -> None:
    atomic.write_bytes_atomic(path, data)


__all__ = ["write_outputs", "default_output_directory", "JSON_NAME", "REPORT_NAME"]
