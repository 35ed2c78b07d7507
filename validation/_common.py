"""Shared plumbing of the validation scripts: command line, result records, figures.

Every validation script ``validation/NAME.py`` is runnable alone::

    python validation/NAME.py --out DIR [--quick]

and writes ``DIR/NAME.json`` (one :class:`Result`) plus its PNG figures into ``DIR``.
The JSON holds the item, its rows (published value and source, measured value, error
bar, agreement and the rule used to decide it), the parameters of the runs, the figure
file names and the wall time. ``run_all.py`` collects them into one HTML report.

Only this folder's scripts run the engines; nothing here is imported by the package.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import time
from dataclasses import asdict, dataclass, field
from pathlib import Path

import numpy as np

__all__ = ["Row", "Result", "parser", "finish", "new_figure", "save_figure",
           "fit_line", "jsonable"]


@dataclass
class Row:
    """One compared quantity.

    ``published`` and ``measured`` are numbers (or None for a qualitative statement,
    which ``published_text`` / ``measured_text`` then carry); ``error`` is the error bar
    of ``measured``; ``agree`` is decided by ``criterion`` (stated in words).
    """

    quantity: str
    published: float | None
    source: str
    measured: float | None
    error: float | None
    agree: bool
    criterion: str
    published_text: str = ""
    measured_text: str = ""


@dataclass
class Result:
    """Everything one validation item writes to its JSON."""

    item: str
    title: str
    rows: list[Row] = field(default_factory=list)
    parameters: dict = field(default_factory=dict)
    figures: list[str] = field(default_factory=list)
    notes: str = ""
    runtime_s: float = 0.0
    quick: bool = False
    details: dict = field(default_factory=dict)

    @property
    def agreement(self) -> bool:
        return bool(self.rows) and all(r.agree for r in self.rows)

    def to_json(self) -> dict:
        d = asdict(self)
        d["agreement"] = self.agreement
        return jsonable(d)


def jsonable(obj):
    """``obj`` with numpy scalars/arrays turned into plain Python (NaN -> None)."""
    if isinstance(obj, dict):
        return {str(k): jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return [jsonable(v) for v in obj.tolist()]
    if isinstance(obj, (np.bool_, bool)):
        return bool(obj)
    if isinstance(obj, (np.integer,)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        v = float(obj)
        return v if math.isfinite(v) else None
    return obj


def parser(description: str) -> argparse.ArgumentParser:
    """Argument parser with the common ``--out`` and ``--quick`` options."""
    ap = argparse.ArgumentParser(description=description)
    ap.add_argument("--out", default="validation_out", help="output folder")
    ap.add_argument("--quick", action="store_true",
                    help="smaller, shorter runs (minutes at most)")
    return ap


def finish(result: Result, out: str | os.PathLike, started: float) -> Path:
    """Write ``OUT/<item>.json`` atomically and print the rows; returns the path."""
    result.runtime_s = time.perf_counter() - started
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    path = out / f"{result.item}.json"
    tmp = path.with_suffix(".json.tmp")
    tmp.write_text(json.dumps(result.to_json(), indent=2))
    os.replace(tmp, path)
    print(f"{result.item}: {result.title}  ({result.runtime_s:.1f} s)")
    for r in result.rows:
        meas = r.measured_text or (f"{r.measured:.4g}" if r.measured is not None else "-")
        err = (f" +- {r.error:.2g}" if r.error is not None and math.isfinite(r.error)
               and "+-" not in r.measured_text else "")
        pub = r.published_text or (f"{r.published:.4g}" if r.published is not None else "-")
        print(f"  {r.quantity}: published {pub} ({r.source}); measured {meas}{err}; "
              f"agree {'yes' if r.agree else 'NO'}")
    print(f"  -> {path}")
    return path


def new_figure(ncols=1, nrows=1, width=5.0, height=3.6):
    """A matplotlib figure on the non-interactive backend."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, axes = plt.subplots(nrows, ncols, figsize=(width * ncols, height * nrows),
                             squeeze=False)
    return fig, axes


def save_figure(fig, out, name: str, result: Result) -> None:
    """Save ``fig`` as ``OUT/name`` (PNG), close it and list it in ``result``."""
    import matplotlib.pyplot as plt

    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    fig.tight_layout()
    fig.savefig(out / name, dpi=90)
    plt.close(fig)
    result.figures.append(name)


def fit_line(x, y):
    """Least-squares ``y = a + b x``: returns ``(b, standard error of b, a)``.

    The standard error is the usual one from the residual variance (n - 2 degrees of
    freedom); 0 for an exact fit or fewer than 3 points.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    n = x.size
    xm, ym = x.mean(), y.mean()
    sxx = float(np.sum((x - xm) ** 2))
    b = float(np.sum((x - xm) * (y - ym)) / sxx)
    a = float(ym - b * xm)
    if n < 3:
        return b, 0.0, a
    res = y - (a + b * x)
    se = math.sqrt(float(np.sum(res**2)) / (n - 2) / sxx)
    return b, se, a
