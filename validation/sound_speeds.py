"""Item 5: continuum sound speeds vs Tu, Toner & Ulm 1998 at several angles.

Published result (Tu, Toner & Ulm 1998, PRL 80, 4819, Eq. for the sound speeds; also
Toner & Tu 1998, PRE 58, 4828): long-wavelength density/transverse-velocity waves in the
ordered phase propagate with the anisotropic speeds
``c+-(theta) = (gamma + v2)/2 cos theta +- sqrt(((gamma - v2)/2)^2 cos^2 theta
+ c0^2 sin^2 theta)``, theta the angle between k and the order. The mapping of
(gamma, v2, c0) onto the crossflock coefficients is
:func:`crossflock.continuum.sound_speed_parameters`; the speeds are
:func:`crossflock.continuum.linear_sound_speeds`.

Test: a coefficient table with all four TTU parameters distinct from zero (lambda1,
lambda3, alpha_rho and the pressure); square periodic box; the spectral engine
(noise_strength = 0, limiter off) starts from the homogeneous ordered state plus the
eigenmode of the "+" or "-" sound branch at the wavevectors 2 pi (m, n) / L for
(m, n) = (1, 0), (2, 1), (1, 1), (1, 2), (0, 1), i.e. theta = 0, 26.6, 45, 63.4, 90
degrees, amplitude 1e-6 rho0. The phase of each mode's density Fourier coefficient
turns at omega; the measured speed is omega / |k| (linear fit of the unwrapped phase).
Error bar: the dt vs dt/2 difference (SBDF2, second order) plus the phase-fit
standard error. The TTU formula is the k -> 0 limit: at these k its expected deviation
from the exact linear speed is of relative order (k c / 2 alpha)^2, well below 1 %.
Agreement: |measured - TTU| <= 2 % of max(|c|, c_scale) where c_scale = max over the
branches and angles of |c| / 10 (so a speed crossing zero is not judged by a relative
error of a tiny number).
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from _common import Result, Row, finish, fit_line, new_figure, parser, save_figure  # noqa: E402
from _modes import eigenmode, mode_config, mode_series, run_modes, wavevector  # noqa: E402

ITEM = "sound_speeds"
SOURCE = "Tu, Toner & Ulm 1998, PRL 80, 4819"
REL_TOL = 0.02
EPS = 1e-6
RHO0, V0 = 2.0, 1.0
# gamma = lambda1 w0 = 0.8, v2 = v0 alpha_rho / (2 beta w0) = 0.25,
# c0^2 = v0 (P'(rho0) + lambda3 alpha_rho / beta) = 0.6   (w0 = sqrt(alpha / beta) = 1)
COEFFICIENTS = {"alpha": 1.0, "alpha_rho": 0.5, "beta": 1.0, "pressure": [0.5],
                "D_T": 0.5, "D_rho": 0.05, "lambda1": 0.8, "lambda3": 0.2}
MODES = [(1, 0), (2, 1), (1, 1), (1, 2), (0, 1)]


def settings(quick: bool, tiny: bool = False) -> dict:
    if tiny:
        return {"L": 128.0, "n": 16, "dt": 0.05, "duration": 20.0, "sample_every": 1.0}
    if quick:
        return {"L": 128.0, "n": 32, "dt": 0.05, "duration": 60.0, "sample_every": 1.0}
    return {"L": 128.0, "n": 64, "dt": 0.04, "duration": 120.0, "sample_every": 1.0}


def measure(branch, s, dt):
    cfg = mode_config(COEFFICIENTS, size=(s["L"], s["L"]), grid=(s["n"], s["n"]),
                      rho0=RHO0, v0=V0, dt=dt, duration=s["duration"],
                      sample_every=s["sample_every"])
    eig = {mn: eigenmode(cfg, *mn, pick=branch) for mn in MODES}
    ds = run_modes(cfg, [(m, n, eig[(m, n)][1]) for m, n in MODES], EPS)
    t = ds["time"].values
    out = {}
    for m, n in MODES:
        kx, ky = wavevector(cfg, m, n)
        k = float(np.hypot(kx, ky))
        # the mode's largest component (at theta = 0 the transverse wave carries no
        # density, so rho alone would not see it)
        var = ("rho", "px", "py")[int(np.argmax(np.abs(eig[(m, n)][1])))]
        phase = np.unwrap(np.angle(mode_series(ds, m, n, var)))
        keep = t >= 2 * s["sample_every"]
        slope, se, _ = fit_line(t[keep], phase[keep])
        out[(m, n)] = {"speed": -slope / k, "fit_se": se / k,
                       "exact": -eig[(m, n)][0].imag / k,
                       "theta": float(np.arctan2(ky, kx)), "k": k}
    return cfg, out


def main(argv=None, tiny=False):
    from crossflock.continuum import _dispersion, linear_sound_speeds, sound_speed_parameters

    args = parser(__doc__.splitlines()[0]).parse_args(argv)
    started = time.perf_counter()
    s = settings(args.quick, tiny)
    res = Result(ITEM, "Continuum sound speeds vs Tu-Toner-Ulm at several angles",
                 quick=args.quick or tiny)
    res.parameters = {"settings": s, "coefficients": COEFFICIENTS, "rho0": RHO0,
                      "v0": V0, "modes_mn": MODES, "eps": EPS, "noise_strength": 0.0,
                      "method": "spectral", "realizability": False}
    measured = {}
    cfg = None
    for branch in ("plus", "minus"):
        cfg, fine = measure(branch, s, s["dt"] / 2)
        _, coarse = measure(branch, s, s["dt"])
        measured[branch] = (fine, coarse)
    w0 = _dispersion.base_state(cfg)["w0"]
    gamma, v2, c0 = sound_speed_parameters(COEFFICIENTS, RHO0, w0, V0)
    res.parameters["ttu"] = {"gamma": gamma, "v2": v2, "c0": c0, "w0": w0}
    thetas = np.array([measured["plus"][0][mn]["theta"] for mn in MODES])
    c_plus, c_minus = linear_sound_speeds(COEFFICIENTS, RHO0, w0, thetas, V0)
    ttu = {"plus": c_plus, "minus": c_minus}
    scale = 0.1 * max(np.max(np.abs(c_plus)), np.max(np.abs(c_minus)))
    fig, axes = new_figure(1, 1, width=6.0, height=4.2)
    ax = axes[0, 0]
    th = np.linspace(0, np.pi / 2, 200)
    cp, cm = linear_sound_speeds(COEFFICIENTS, RHO0, w0, th, V0)
    ax.plot(np.degrees(th), cp, "k-", label="TTU c+")
    ax.plot(np.degrees(th), cm, "k--", label="TTU c-")
    for branch, mark in (("plus", "o"), ("minus", "s")):
        fine, coarse = measured[branch]
        for i, mn in enumerate(MODES):
            c_f, c_c = fine[mn]["speed"], coarse[mn]["speed"]
            err = 4.0 / 3.0 * abs(c_c - c_f) + fine[mn]["fit_se"]
            ref = float(ttu[branch][i])
            agree = abs(c_f - ref) <= REL_TOL * max(abs(ref), scale)
            deg = np.degrees(fine[mn]["theta"])
            res.rows.append(Row(
                quantity=f"c{'+' if branch == 'plus' else '-'} at theta = {deg:.1f} deg "
                         f"(k = {fine[mn]['k']:.3g})",
                published=ref, source=SOURCE, measured=c_f, error=err, agree=bool(agree),
                criterion=f"|measured - TTU| <= {REL_TOL:.0%} of max(|c|, {scale:.3g})"))
            res.details[f"{branch}_{mn[0]}_{mn[1]}"] = {
                "theta_deg": deg, "k": fine[mn]["k"], "speed_dt_half": c_f,
                "speed_dt": c_c, "ttu": ref, "exact_linear": fine[mn]["exact"]}
            ax.errorbar([deg], [c_f], yerr=[err], fmt=mark, color="C3" if branch == "plus"
                        else "C0", label=f"engine c{'+' if branch == 'plus' else '-'}"
                        if i == 0 else None)
    # the engine against the exact eigenvalues of its own linearised equations (the
    # TTU formula is their k -> 0 limit): differences are time-stepping error only
    dev = max(abs(measured[b][0][mn]["speed"] - measured[b][0][mn]["exact"])
              for b in ("plus", "minus") for mn in MODES)
    res.rows.append(Row(
        quantity="max |engine - exact linear phase speed| over branches and angles",
        published=0.0, source="growth-matrix eigenvalues at the same k "
        "(crossflock.continuum._dispersion)", measured=dev, error=None,
        agree=bool(dev <= 1e-3 * scale), criterion=f"<= 1e-3 x {scale:.3g}"))
    ax.axhline(0, color="0.6", lw=0.8)
    ax.set(xlabel="angle between k and the order (deg)", ylabel="phase speed",
           title=f"gamma={gamma:.3g}, v2={v2:.3g}, c0={c0:.3g}")
    ax.legend(fontsize=8)
    save_figure(fig, args.out, f"{ITEM}.png", res)
    return finish(res, args.out, started)


if __name__ == "__main__":
    main()
