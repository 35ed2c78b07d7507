"""Coefficients of the continuum equations as the solvers consume them.

Two forms (GUIDE section 3): a table, where only alpha depends on rho
(``alpha(rho) = alpha + alpha_rho (rho - rho0)``), and ``"kinetic"``, where alpha, beta,
D_T and lambda1-3 are the Bertin-Droz-Gregoire coefficients evaluated at the local density
every time the right-hand side is evaluated (:func:`crossflock._kinetic.kinetic_local`).
"""

from __future__ import annotations

import numpy as np

from .._kinetic import kinetic_linear_form, kinetic_local

__all__ = ["CoefficientModel", "SCALARS", "LOCALS"]

# Layout of the scalar vector handed to the compiled kernels.
SCALARS = ("alpha", "alpha_rho", "beta", "D_T", "lambda1", "lambda2", "lambda3", "D_B",
           "D_2", "D_rho", "v0", "rho0")
# Layout of the local (per-cell) coefficient stack in kinetic mode.
LOCALS = ("alpha", "beta", "D_T", "lambda1", "lambda2", "lambda3")


class CoefficientModel:
    """Coefficients of one config.

    Attributes
    ----------
    kinetic : bool
        True when the coefficients depend on the local density.
    scalars : (12,) float64 ndarray
        Values in the order of :data:`SCALARS` (kinetic ones at rho0).
    pressure : (K,) float64 ndarray
        Pressure polynomial coefficients.
    noise_strength : float
    """

    def __init__(self, cfg):
        self._cfg = cfg
        self.rho0 = float(cfg.model.density)
        self.v0 = float(cfg.model.speed)
        coef = cfg.continuum.coefficients
        self.kinetic = coef == "kinetic"
        if self.kinetic:
            ref = kinetic_local(cfg, self.rho0)
            ref = {k: (float(v) if not isinstance(v, tuple) else v) for k, v in ref.items()}
            ref["alpha_rho"] = 0.0  # carried by the local evaluation instead
        else:
            ref = {name: getattr(coef, name) for name in coef.__dataclass_fields__}
        self.reference = ref
        vals = dict(ref, v0=self.v0, rho0=self.rho0)
        self.scalars = np.array([float(vals[k]) for k in SCALARS], dtype=np.float64)
        self.pressure = np.array(ref["pressure"], dtype=np.float64).reshape(-1)
        self.noise_strength = float(ref["noise_strength"])
        self._dummy = np.zeros((len(LOCALS), 1, 1))
        self._form = kinetic_linear_form(cfg) if self.kinetic else None
        self._scratch = None

    def get(self, name: str) -> float:
        """Scalar coefficient ``name`` (at rho0 in kinetic mode)."""
        return float(self.scalars[SCALARS.index(name)])

    def local(self, rho: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
        """Per-cell coefficients ``(6, ny, nx)`` (order :data:`LOCALS`) in kinetic mode.

        In table mode returns a ``(6, 1, 1)`` placeholder the kernels ignore.
        """
        if not self.kinetic:
            return self._dummy
        if out is None:
            out = np.empty((len(LOCALS),) + rho.shape)
        if self._scratch is None or self._scratch.shape != rho.shape:
            self._scratch = np.empty(rho.shape)
        # the closed form of kinetic_local, evaluated into buffers (called every step)
        f, q = self._form, self._scratch
        np.maximum(rho, 0.0, out=q)
        np.multiply(q, f["alpha_slope"], out=out[0])
        out[0] += f["alpha_offset"]
        q *= f["q_b"]
        q += f["q_a"]
        np.divide(1.0, q, out=q)
        for i, name in enumerate(LOCALS[1:], start=1):
            np.multiply(q, f["per_q"][name], out=out[i])
        return out

    def kinetic_vector(self) -> np.ndarray | None:
        """The closed form of :meth:`local` as a ``(9,)`` vector for compiled kernels.

        Order ``q_a, q_b, alpha_slope, alpha_offset`` then ``per_q`` of beta, D_T,
        lambda1-3: with ``q = 1 / (q_a + q_b max(rho, 0))``, alpha is
        ``max(rho, 0) alpha_slope + alpha_offset`` and the others ``q per_q``. None in
        table mode.
        """
        if not self.kinetic:
            return None
        f = self._form
        return np.array([f["q_a"], f["q_b"], f["alpha_slope"], f["alpha_offset"]]
                        + [f["per_q"][name] for name in LOCALS[1:]], dtype=np.float64)

    def alpha_at(self, rho):
        """alpha(rho) (the full local growth rate)."""
        if self.kinetic:
            return kinetic_local(self._cfg, rho)["alpha"]
        return self.get("alpha") + self.get("alpha_rho") * (np.asarray(rho) - self.rho0)
