"""Item 1: Vicsek order parameter and Binder cumulant vs noise for several system sizes.

Published results (Gregoire & Chate 2004, PRL 92, 025702; Chate, Ginelli, Gregoire &
Raynaud 2008, PRE 77, 046113; vectorial noise): at fixed density the onset of order is
discontinuous. With increasing system size the drop of the order parameter sharpens
(the peak of the susceptibility chi = N (<phi^2> - <phi>^2) grows; for a discontinuous
transition as L^d) and the Binder cumulant G = 1 - <phi^4> / (3 <phi^2>^2) shows a dip
near the transition, below its disordered-phase value 1/3 (to negative values at large
sizes), where a continuous transition would give a monotonic G between 2/3 and 1/3
(Binder 1981, Z. Phys. B 43, 119).

Measurement: vectorial-noise Vicsek model (density 2, speed 0.5, R = 1, dt = 1), square
periodic boxes, ordered start, noise scan; ``crossflock.agents.simulate`` then
``crossflock.compare.observe`` (first ``transient`` of the run discarded; order error
from the autocorrelation time; Binder error from the blocked jackknife). chi and its
error: blocked jackknife with the same block length.

Agreement: (1) the Binder cumulant dips below 1/3 by more than two error bars at some
noise and size (the minima of every size are reported); (2) sharpening: the steepest
drop of <phi> between neighbouring noise values, -d<phi>/d eta, is larger at the
largest size than at the smallest by more than two error bars. The peak of chi is
shown but not judged: near a discontinuous transition it is reached only inside the
narrow noise window where the run switches between states within its duration.
"""

from __future__ import annotations

import math
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from _common import Result, Row, finish, new_figure, parser, save_figure  # noqa: E402
from _particles import particle_config  # noqa: E402

ITEM = "vicsek_transition"
SOURCE = "Gregoire & Chate 2004, PRL 92, 025702; Chate et al. 2008, PRE 77, 046113"


def settings(quick: bool) -> dict:
    # The transition is within 0.61 < eta < 0.62 at these sizes; the grid is fine there.
    # Near it the run must be long enough to switch between the ordered and the
    # disordered state several times (which gives the Binder dip).
    if quick:
        return {"sizes": [16.0, 32.0], "durations": [50000, 30000],
                "noises": [0.6, 0.61, 0.615, 0.6175, 0.62, 0.625, 0.63],
                "sample_every": 5.0, "transient": 0.1}
    return {"sizes": [16.0, 32.0, 64.0], "durations": [100000, 60000, 30000],
            "noises": [0.58, 0.6, 0.605, 0.61, 0.6125, 0.615, 0.6175, 0.62, 0.625, 0.63,
                       0.65],
            "sample_every": 5.0, "transient": 0.1}


def max_slope(noises, order, order_err):
    """Steepest drop ``-(phi_{i+1} - phi_i) / (eta_{i+1} - eta_i)`` and its error."""
    d = -np.diff(order) / np.diff(noises)
    i = int(np.nanargmax(d))
    err = math.hypot(order_err[i], order_err[i + 1]) / (noises[i + 1] - noises[i])
    return float(d[i]), float(err), i


def susceptibility(phi, n, tau):
    from crossflock.compare import blocked_jackknife
    from crossflock.compare._stats import jackknife_block_length

    def chi(p):
        return float(n * np.var(p))

    return blocked_jackknife(chi, np.asarray(phi, float), jackknife_block_length(tau))


def point(L, eta, duration, s):
    from crossflock.agents import simulate
    from crossflock.compare import analysis_window, autocorrelation_time, observe

    cfg = particle_config(size=(L, L), density=2.0, speed=0.5, noise=eta,
                          duration=duration, sample_every=s["sample_every"],
                          transient=s["transient"])
    ds = simulate(cfg, progress=False)
    obs = observe(ds)
    phi = ds["order"].values[analysis_window(ds["time"].values, s["transient"])]
    tau = autocorrelation_time(phi)
    chi, chi_err = susceptibility(phi, int(ds.attrs["n_particles"]), tau)
    return {"order": float(obs["order_mean"]), "order_err": float(obs["order_sem"]),
            "binder": float(obs["binder"]), "binder_err": float(obs["binder_err"]),
            "chi": chi, "chi_err": chi_err, "n": int(ds.attrs["n_particles"])}


def main(argv=None):
    args = parser(__doc__.splitlines()[0]).parse_args(argv)
    started = time.perf_counter()
    s = settings(args.quick)
    res = Result(ITEM, "Vicsek order parameter and Binder cumulant vs noise (vectorial "
                 "noise), several sizes", quick=args.quick)
    res.parameters = {"settings": s, "density": 2.0, "speed": 0.5, "radius": 1.0,
                      "noise_kind": "vectorial", "initial": "ordered", "dt": 1.0,
                      "seed": 1}
    table = {}
    for L, dur in zip(s["sizes"], s["durations"], strict=True):
        rows = [point(L, eta, dur, s) for eta in s["noises"]]
        table[L] = {k: np.array([r[k] for r in rows]) for k in rows[0]}
        print(f"  L = {L:g}: done ({time.perf_counter() - started:.0f} s)", flush=True)
    noises = np.array(s["noises"])
    big, small = max(s["sizes"]), min(s["sizes"])
    gmins = {}
    for L in s["sizes"]:
        i = int(np.nanargmin(table[L]["binder"]))
        gmins[L] = (float(table[L]["binder"][i]), float(table[L]["binder_err"][i]),
                    float(noises[i]))
    deepest = min(gmins, key=lambda L: gmins[L][0] + 2 * gmins[L][1])
    gmin, gerr, geta = gmins[deepest]
    res.rows.append(Row(
        quantity="Binder cumulant dip near the transition",
        published=1 / 3, source=SOURCE, measured=gmin, error=gerr,
        published_text="dip below 1/3 (the disordered value), deeper at large L",
        measured_text="; ".join(f"L={L:g}: {g:.3f} +- {e:.2g} at eta={n:g}"
                                for L, (g, e, n) in gmins.items()),
        agree=bool(gmin + 2 * gerr < 1 / 3),
        criterion="min over sizes and noise of G + 2 err < 1/3"))
    sb, eb, _ = max_slope(noises, table[big]["order"], table[big]["order_err"])
    ss, es, _ = max_slope(noises, table[small]["order"], table[small]["order_err"])
    ratio = sb / ss
    ratio_err = float(ratio * math.hypot(eb / sb, es / ss))
    res.rows.append(Row(
        quantity=f"sharpening: steepest drop of <phi> (L={big:g}) / (L={small:g})",
        published=None, source=SOURCE, measured=ratio, error=ratio_err,
        published_text="> 1 (the drop sharpens with size)",
        agree=bool(ratio - 2 * ratio_err > 1.0),
        criterion="ratio - 2 err > 1 (resolution: the noise grid)"))
    for L in s["sizes"]:
        t = table[L]
        j = int(np.nanargmax(t["chi"]))
        res.details[f"L{L:g}"] = {"N": int(t["n"][0]), "eta_chi_max": float(noises[j]),
                                  **{k: t[k] for k in ("order", "order_err", "binder",
                                                       "binder_err", "chi", "chi_err")}}
    res.details["noises"] = noises
    fig, axes = new_figure(3, 1, width=4.3, height=3.6)
    for L in s["sizes"]:
        t = table[L]
        lab = f"L = {L:g} (N = {int(t['n'][0])})"
        axes[0, 0].errorbar(noises, t["order"], yerr=t["order_err"], fmt="o-", ms=3,
                            label=lab)
        axes[0, 1].errorbar(noises, t["binder"], yerr=t["binder_err"], fmt="o-", ms=3,
                            label=lab)
        axes[0, 2].errorbar(noises, t["chi"], yerr=t["chi_err"], fmt="o-", ms=3, label=lab)
    axes[0, 0].set(xlabel="noise eta", ylabel="<phi>", title="polar order")
    axes[0, 1].axhline(1 / 3, color="0.5", ls=":", lw=0.8)
    axes[0, 1].axhline(2 / 3, color="0.5", ls=":", lw=0.8)
    axes[0, 1].set(xlabel="noise eta", ylabel="G", title="Binder cumulant")
    axes[0, 2].set(xlabel="noise eta", ylabel="N var(phi)", title="susceptibility",
                   yscale="log")
    for ax in axes[0]:
        ax.legend(fontsize=7)
    save_figure(fig, args.out, f"{ITEM}.png", res)
    return finish(res, args.out, started)


if __name__ == "__main__":
    main()
