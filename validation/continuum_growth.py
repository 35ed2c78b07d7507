"""Item 4: linear (in)stability of the homogeneous ordered state in the continuum engine.

Published result (Bertin, Droz & Gregoire 2009, J. Phys. A 42, 445001, section on the
linear stability of the homogeneous polar state): just above the onset of order, where
alpha(rho0) is small and alpha grows with density (alpha_rho > 0), the homogeneous
ordered state is linearly unstable to long-wavelength density modulations along the
order (the band instability); deeper in the ordered phase it is stable.

Test: for two coefficient tables, (a) near onset (alpha = 0.05, alpha_rho = 1) and
(b) deep order (alpha = 0.5, alpha_rho = 0.2), start the spectral engine (deterministic,
noise_strength = 0, limiter off) from the homogeneous state plus the least-stable
eigenmode of one wavevector k = (2 pi m / Lx, 0) along the order (one run per m),
amplitude 1e-6 rho0, and fit the growth rate of each mode's Fourier coefficient. The reference is
the largest real part of the eigenvalues of the 3 x 3 linearised growth matrix
(``crossflock.continuum._dispersion.growth_matrix``, the suite's own linear analysis).
Error bar: the time-discretisation error estimated from a second run at dt / 2
(SBDF2 is second order: error(dt) ~ (4/3) |r(dt) - r(dt/2)|) plus the standard error
of the log-amplitude fit. Agreement: |measured - linear| <= 3 % of |linear| (the
issue's "within a few percent") for every mode, the sign of the fastest rate matching
(unstable in (a), stable in (b)).
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from _common import Result, Row, finish, fit_line, new_figure, parser, save_figure  # noqa: E402
from _modes import eigenmode, mode_config, mode_series, run_modes  # noqa: E402

ITEM = "continuum_growth"
SOURCE = "Bertin, Droz & Gregoire 2009, J. Phys. A 42, 445001 (linear stability)"
REL_TOL = 0.03
EPS = 1e-6

# Coefficient tables (GUIDE section 3 notation), rho0 = 1, v0 = 1.
CASES = {
    "near_onset": {"alpha": 0.05, "alpha_rho": 1.0, "beta": 1.0, "pressure": [0.25],
                   "D_T": 1.0, "D_rho": 0.1, "lambda1": 0.5},
    "deep_order": {"alpha": 0.5, "alpha_rho": 0.2, "beta": 1.0, "pressure": [0.25],
                   "D_T": 1.0, "D_rho": 0.1, "lambda1": 0.5},
}
MODES = {"near_onset": [1, 2, 4, 6], "deep_order": [2, 4, 6, 8]}


def settings(quick: bool, tiny: bool = False) -> dict:
    if tiny:
        return {"lx": 100.0, "nx": 64, "ny": 8, "dt": 0.1, "duration": 40.0,
                "sample_every": 2.0}
    if quick:
        return {"lx": 100.0, "nx": 128, "ny": 8, "dt": 0.05, "duration": 80.0,
                "sample_every": 2.0}
    return {"lx": 100.0, "nx": 128, "ny": 8, "dt": 0.02, "duration": 150.0,
            "sample_every": 2.0}


def measure(coefs, modes, s, dt):
    """Fitted growth rate (and its fit s.e.) of each mode; also the log-amplitudes."""
    lx = s["lx"]
    ly = lx / s["nx"] * s["ny"]
    cfg = mode_config(coefs, size=(lx, ly), grid=(s["nx"], s["ny"]), rho0=1.0, v0=1.0,
                      dt=dt, duration=s["duration"], sample_every=s["sample_every"])
    out = {}
    for m in modes:
        # one mode per run: with several, the quadratic coupling of two growing modes
        # (m = 2 and 4 -> 6) reaches the amplitude of a slower one late in the run
        eig = eigenmode(cfg, m, 0)
        ds = run_modes(cfg, [(m, 0, eig[1])], EPS)
        t = ds["time"].values
        amp = np.abs(mode_series(ds, m, 0))
        keep = t >= 2 * s["sample_every"]  # skip the first-order SBDF2 start-up step
        rate, se, _ = fit_line(t[keep], np.log(amp[keep]))
        out[m] = {"rate": rate, "fit_se": se, "linear": eig[0].real,
                  "t": t, "log_amp": np.log(amp / amp[0]),
                  "k": 2 * np.pi * m / lx}
    return cfg, out


def main(argv=None, tiny=False):
    args = parser(__doc__.splitlines()[0]).parse_args(argv)
    started = time.perf_counter()
    s = settings(args.quick, tiny)
    res = Result(ITEM, "Continuum: growth rates of the homogeneous ordered state vs "
                 "linear stability", quick=args.quick or tiny)
    res.parameters = {"settings": s, "cases": CASES, "modes_m": MODES, "eps": EPS,
                      "rho0": 1.0, "v0": 1.0, "noise_strength": 0.0,
                      "method": "spectral", "realizability": False}
    fig, axes = new_figure(2, 2, width=5.0, height=3.6)
    for col, (name, coefs) in enumerate(CASES.items()):
        modes = MODES[name]
        cfg, fine = measure(coefs, modes, s, s["dt"] / 2)
        _, coarse = measure(coefs, modes, s, s["dt"])
        # dispersion curve for the figure
        from crossflock.continuum import _dispersion

        kk = np.linspace(0.01, 2 * np.pi * (max(modes) + 2) / s["lx"], 200)
        axes[0, col].plot(kk, _dispersion.growth_rates(cfg, kk, 0 * kk), "k-",
                          label="linear theory (max Re s)")
        for m in modes:
            r_f, r_c = fine[m]["rate"], coarse[m]["rate"]
            err = 4.0 / 3.0 * abs(r_c - r_f) + fine[m]["fit_se"]
            lin = fine[m]["linear"]
            agree = abs(r_f - lin) <= REL_TOL * abs(lin)
            kind = "unstable" if lin > 0 else "stable"
            res.rows.append(Row(
                quantity=f"{name}: growth rate of k_par = 2 pi {m}/Lx ({kind})",
                published=lin, source=SOURCE + "; value from the suite's growth matrix",
                measured=r_f, error=err, agree=bool(agree),
                criterion=f"|measured - linear| <= {REL_TOL:.0%} of |linear|"))
            axes[0, col].errorbar([fine[m]["k"]], [r_f], yerr=[err], fmt="o", color="C3")
            axes[1, col].plot(fine[m]["t"], fine[m]["log_amp"], "-", label=f"m = {m}")
            axes[1, col].plot(fine[m]["t"], lin * fine[m]["t"], "k:", lw=0.8)
        rates = [fine[m]["rate"] for m in modes]
        expected_unstable = name == "near_onset"
        fastest = max(rates)
        res.rows.append(Row(
            quantity=f"{name}: homogeneous ordered state "
                     f"{'unstable' if expected_unstable else 'stable'} along the order",
            published=None, source=SOURCE,
            published_text="unstable (bands)" if expected_unstable else "stable",
            measured=fastest, error=None,
            measured_text=f"fastest measured rate {fastest:.4g}",
            agree=bool((fastest > 0) == expected_unstable),
            criterion="sign of the fastest measured rate"))
        res.details[name] = {str(m): {"rate_dt_half": fine[m]["rate"],
                                      "rate_dt": coarse[m]["rate"],
                                      "linear": fine[m]["linear"],
                                      "k": fine[m]["k"]} for m in modes}
        axes[0, col].axhline(0, color="0.6", lw=0.8)
        axes[0, col].set(title=f"{name}: alpha={coefs['alpha']}, "
                               f"alpha_rho={coefs['alpha_rho']}",
                         xlabel="k along the order", ylabel="growth rate")
        axes[0, col].legend(fontsize=8)
        axes[1, col].set(xlabel="t", ylabel="ln |rho_k(t) / rho_k(0)|",
                         title="mode amplitudes (dotted: linear theory)")
        axes[1, col].legend(fontsize=8)
    save_figure(fig, args.out, f"{ITEM}.png", res)
    res.notes = ("Coefficient tables, not the kinetic mapping: the truncated kinetic "
                 "equations are linearly unstable at short wavelengths at low noise.")
    return finish(res, args.out, started)


if __name__ == "__main__":
    main()
