"""Run the physics validation items one after another and write one HTML report.

Usage::

    python validation/run_all.py --out DIR [--quick] [--only NAME ...] [--report-only]
        [--with-calibration]

Each item is a script of this folder, run in its own process (one at a time: the
machine's cores are shared) as ``python validation/NAME.py --out DIR [--quick]``; it
writes ``DIR/NAME.json`` and PNG figures. The report ``DIR/validation_report.html`` is
self-contained (figures base64-embedded) and opens with the summary table: item,
published value (and source), measured value with error bar, agreement. With
``--report-only`` the JSON files already in DIR are collected without running
anything. ``--with-calibration`` also runs ``calibration_crossval.py`` (kept by the
calibration work, not a published-result check) and embeds its printed output.
"""

from __future__ import annotations

import base64
import html
import json
import math
import subprocess
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

from _common import parser  # noqa: E402

HERE = Path(__file__).resolve().parent
ITEMS = ["vicsek_transition", "bands", "giant_fluctuations", "continuum_growth",
         "sound_speeds"]

_CSS = """
body { font-family: sans-serif; margin: 2em; max-width: 1100px; }
table { border-collapse: collapse; margin: 1em 0; font-size: 0.9em; }
th, td { border: 1px solid #bbb; padding: 0.3em 0.6em; text-align: left;
         vertical-align: top; }
th { background: #eee; }
td.yes { background: #d8f0d8; } td.no { background: #f6d4d4; }
img { max-width: 100%; border: 1px solid #ddd; }
pre { background: #f6f6f6; padding: 0.6em; overflow-x: auto; font-size: 0.8em; }
.small { color: #555; font-size: 0.85em; }
"""


def run_item(name: str, out: Path, quick: bool) -> dict:
    """Run one item script; returns ``{name, returncode, wall_s, stdout, stderr}``."""
    cmd = [sys.executable, str(HERE / f"{name}.py"), "--out", str(out)]
    if quick:
        cmd.append("--quick")
    print(f"== {name}", flush=True)
    t0 = time.perf_counter()
    proc = subprocess.run(cmd, capture_output=True, text=True)
    wall = time.perf_counter() - t0
    sys.stdout.write(proc.stdout)
    if proc.returncode:
        sys.stdout.write(proc.stderr[-4000:])
    return {"name": name, "returncode": proc.returncode, "wall_s": wall,
            "stdout": proc.stdout, "stderr": proc.stderr}


def _fmt(v, err=None, text=""):
    if text:
        s = text
    elif v is None:
        s = "-"
    else:
        s = f"{v:.4g}"
    if err is not None and isinstance(err, (int, float)) and math.isfinite(err) \
            and "+-" not in text:
        s += f" &plusmn; {err:.2g}"
    return s


def _img(path: Path) -> str:
    data = base64.b64encode(path.read_bytes()).decode("ascii")
    return f'<img alt="{html.escape(path.name)}" src="data:image/png;base64,{data}">'


def write_report(out: Path, runs: dict | None = None, extra: str = "") -> Path:
    """Collect ``OUT/*.json`` of the known items into ``OUT/validation_report.html``."""
    results = []
    for name in ITEMS:
        path = out / f"{name}.json"
        if path.exists():
            results.append(json.loads(path.read_text()))
        elif runs and name in runs:
            results.append({"item": name, "title": name, "rows": [], "failed": True,
                            "stderr": runs[name]["stderr"][-3000:]})
    summary = ["<tr><th>item</th><th>quantity</th><th>published (source)</th>"
               "<th>measured &plusmn; error</th><th>agree</th><th>criterion</th></tr>"]
    sections = []
    for r in results:
        rows = r.get("rows", [])
        label = html.escape(r["item"]) + (" (quick)" if r.get("quick") else "")
        if r.get("failed"):
            summary.append(f'<tr><td>{label}</td><td colspan="4">the script failed</td>'
                           '<td class="no">no</td></tr>')
        for i, row in enumerate(rows):
            agree = "yes" if row["agree"] else "no"
            pub = _fmt(row["published"], text=html.escape(row.get("published_text", "")))
            meas = _fmt(row["measured"], row.get("error"),
                        html.escape(row.get("measured_text", "")))
            first = (f'<td rowspan="{len(rows)}"><a href="#{html.escape(r["item"])}">'
                     f"{label}</a></td>" if i == 0 else "")
            summary.append(
                f"<tr>{first}<td>{html.escape(row['quantity'])}</td>"
                f"<td>{pub}<br><span class='small'>{html.escape(row['source'])}</span></td>"
                f"<td>{meas}</td><td class='{agree}'>{agree}</td>"
                f"<td class='small'>{html.escape(row['criterion'])}</td></tr>")
        body = [f'<h2 id="{html.escape(r["item"])}">{html.escape(r.get("title", ""))}</h2>']
        if r.get("failed"):
            body.append(f"<pre>{html.escape(r['stderr'])}</pre>")
        else:
            verdict = "agrees" if r.get("agreement") else "does NOT agree"
            body.append(f"<p><b>{label}</b>: {verdict} with the published result; "
                        f"run time {r.get('runtime_s', 0):.1f} s.</p>")
            if r.get("notes"):
                body.append(f"<p>{html.escape(r['notes'])}</p>")
            for fig in r.get("figures", []):
                p = out / fig
                if p.exists():
                    body.append(_img(p))
            body.append("<details><summary>parameters</summary><pre>"
                        + html.escape(json.dumps(r.get("parameters", {}), indent=1))
                        + "</pre></details>")
            body.append("<details><summary>details</summary><pre>"
                        + html.escape(json.dumps(r.get("details", {}), indent=1))
                        + "</pre></details>")
        sections.append("\n".join(body))
    n_ok = sum(1 for r in results if r.get("agreement"))
    if runs:
        times = "".join(
            f"<li>{html.escape(n)}: {v['wall_s']:.0f} s (exit {v['returncode']})</li>"
            for n, v in runs.items())
    else:  # collected from the JSON files: the items' own timing
        times = "".join(f"<li>{html.escape(r['item'])}: {r.get('runtime_s', 0):.0f} s</li>"
                        for r in results if not r.get("failed"))
    page = (
        "<!DOCTYPE html><html><head><meta charset='utf-8'>"
        f"<title>crossflock validation</title><style>{_CSS}</style></head><body>"
        "<h1>crossflock physics validation</h1>"
        f"<p>{n_ok} of {len(results)} items agree with the published results.</p>"
        f"<table>{''.join(summary)}</table>"
        + (f"<p>Wall times:</p><ul>{times}</ul>" if times else "")
        + "\n".join(sections) + extra + "</body></html>")
    path = out / "validation_report.html"
    tmp = path.with_suffix(".html.tmp")
    tmp.write_text(page)
    tmp.replace(path)
    return path


def main(argv=None):
    ap = parser(__doc__.splitlines()[0])
    ap.add_argument("--only", nargs="+", choices=ITEMS, help="run only these items")
    ap.add_argument("--report-only", action="store_true",
                    help="collect the JSON files already in --out")
    ap.add_argument("--with-calibration", action="store_true",
                    help="also run calibration_crossval.py and embed its output")
    args = ap.parse_args(argv)
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    runs = {}
    extra = ""
    if not args.report_only:
        for name in args.only or ITEMS:
            runs[name] = run_item(name, out, args.quick)
        if args.with_calibration:
            cmd = [sys.executable, str(HERE / "calibration_crossval.py")]
            if args.quick:
                cmd.append("--quick")
            t0 = time.perf_counter()
            proc = subprocess.run(cmd, capture_output=True, text=True)
            extra = ("<h2>Calibration cross-validation (calibration_crossval.py)</h2>"
                     f"<p>{time.perf_counter() - t0:.0f} s, exit {proc.returncode}</p>"
                     f"<pre>{html.escape(proc.stdout[-20000:])}</pre>")
    path = write_report(out, runs, extra)
    print(f"report: {path}")
    return 0 if all(r["returncode"] == 0 for r in runs.values()) else 1


if __name__ == "__main__":
    sys.exit(main())
