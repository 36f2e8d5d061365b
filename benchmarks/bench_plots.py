"""Time of the report's figures for a 12-tap profile, against a baseline drawn in the same run.

    python benchmarks/bench_plots.py [--periods 2000] [--repeat 3]

The baseline is matplotlib's own floor on this machine: one 2 x 3 grid of
empty axes rendered to PNG at the same size and DPI (what any six-panel figure
costs before a single curve is drawn). The scenario is invented: twelve taps,
two Rician, at f_D = 60 Hz, records of T f_D = PERIODS at 10 f_D.
"""

from __future__ import annotations

import argparse
import io
import os
import sys
import time
from dataclasses import replace
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path[:0] = [str(ROOT), str(ROOT / "tests")]

from matplotlib.backends.backend_agg import FigureCanvasAgg  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402

from emucompile.report import figures as plots  # noqa: E402

from emucompile.report import html as report  # noqa: E402
from verification_standin import standin_verification  # noqa: E402


def _baseline() -> float:
    start = time.perf_counter()
    figure = Figure(figsize=(12.6, 6.8), dpi=plots.DPI)
    for i in range(6):
        figure.add_subplot(2, 3, i + 1)
    FigureCanvasAgg(figure).print_png(io.BytesIO())
    return time.perf_counter() - start


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--periods", type=float, default=2000.0)
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    verification = standin_verification("profiles_demo/port-crane-los.yaml", periods=args.periods)
    taps = verification.profile.taps
    verification.profile = replace(verification.profile,
                                   taps=tuple(replace(t, index=i) for i, t in enumerate(taps + taps)))
    verification.records = {i: verification.records[i % 6] for i in range(12)}
    verification.models = {i: verification.models[i % 6] for i in range(12)}
    verification.fir_map = plots.np.vstack([verification.fir_map, verification.fir_map])
    _baseline()
    plots.make_figures(verification)  # warm: fonts, caches
    best = {"baseline": [], "serial": [], "report": []}
    for _ in range(args.repeat):
        best["baseline"].append(_baseline())
        start = time.perf_counter()
        figures = plots.make_figures(verification)
        best["serial"].append(time.perf_counter() - start)
        start = time.perf_counter()
        text = report.render_report(verification, figures)
        best["report"].append(time.perf_counter() - start)
    baseline, serial_s, report_s = (min(best[k]) for k in ("baseline", "serial", "report"))
    size = sum(len(png) for _, png in figures)
    print(f"12 taps, T f_D = {args.periods:g}: {len(figures)} figures, {size / 1e6:.2f} MB of PNG, "
          f"report {len(text) / 1e6:.2f} MB")
    print(f"baseline (empty 2x3 grid to PNG): {baseline:.3f} s")
    print(f"make_figures: {serial_s:.2f} s = {serial_s / baseline:.1f} x baseline "
          f"({serial_s / len(figures) / baseline:.2f} x per figure; load average {os.getloadavg()[0]:.1f})")
    print(f"render_report: {report_s:.3f} s = {report_s / baseline:.2f} x baseline")


if __name__ == "__main__":
    main()
