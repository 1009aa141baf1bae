"""Gas properties of the pipes: per-case coefficient arrays for :mod:`cyclesim.pipes.kernels`.

A pipe gas is two frozen mixtures, fresh charge and burned gas, each with a
constant gas constant and a two-range internal-energy polynomial; the pipe
carries the burned-gas mass fraction and mixes the two by mass.  The
coefficients come from the project's NASA-7 data (:mod:`cyclesim.gas.thermo`):
fresh charge of fuel vapour and air at the equivalence ratio, burned gas as
its complete-combustion products, both at the polynomials' switch at 1000 K.
The constant-gamma gas (the reference tests' gas) has linear u(T).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

import cyclesim.gas.thermo as thermo


@dataclass(frozen=True)
class PipeGas:
    """Coefficients of a batch's pipe gas.

    Attributes
    ----------
    coef : ndarray (B, 2, 2, 6)
        ``u(T) = sum_k coef[b, gas, range, k] T^k`` [J/kg]; gas 0 fresh, 1 burned;
        range 0 below ``t_mid_K``, 1 above.
    R : ndarray (B, 2)
        Gas constants of fresh charge and burned gas [J/(kg K)].
    t_mid_K : float
        Temperature of the range switch [K].
    newton_steps : int
        Newton steps that recover T from u (1 is exact for a linear u).
    """

    coef: np.ndarray
    R: np.ndarray
    t_mid_K: float
    newton_steps: int

    @property
    def B(self) -> int:
        return self.coef.shape[0]


def constant_gamma(gamma, R_J_per_kgK, n_cases: int = 1) -> PipeGas:
    """Calorically perfect gas, the same for fresh and burned: ``u = R T / (gamma - 1)``."""
    g = np.broadcast_to(np.asarray(gamma, float), (n_cases,))
    R = np.broadcast_to(np.asarray(R_J_per_kgK, float), (n_cases,))
    coef = np.zeros((n_cases, 2, 2, 6))
    coef[:, :, :, 1] = (R / (g - 1.0))[:, None, None]
    return PipeGas(coef, np.stack([R, R], axis=1).copy(), thermo.T_MID, 1)


def _u_polynomial(low, high, R):
    """u(T) [J/kg] coefficients (2, 6) of a NASA-7 mixture: R (a6 + (a1-1) T + a2 T^2/2 + ... + a5 T^5/5)."""
    out = np.empty((2, 6))
    for r, a in enumerate((low, high)):
        out[r] = R * np.array([a[5], a[0] - 1.0, a[1] / 2, a[2] / 3, a[3] / 4, a[4] / 5])
    return out


def fuel_mixture(fuel, phi) -> PipeGas:
    """Fresh charge of ``fuel`` at equivalence ratio ``phi`` (B,) and its complete-combustion products.

    Absolute energies (formation enthalpies included), so mixing the two in a
    pipe conserves energy; no reaction in the pipes (frozen composition).
    """
    phi = np.atleast_1d(np.asarray(phi, float))
    coef = np.empty((phi.size, 2, 2, 6))
    R = np.empty((phi.size, 2))
    rec = {"FUEL": fuel.nasa7[:5] + ({"C": fuel.C, "H": fuel.H, "O": fuel.O, "N": fuel.N},)}
    for i, ph in enumerate(phi):
        low, high, M = thermo.mixture_nasa7(thermo.fresh_charge(fuel, float(ph)), rec)
        R[i, 0] = thermo.R_U / M
        coef[i, 0] = _u_polynomial(low, high, R[i, 0])
        b, _ = thermo.fresh_charge_elements(fuel, float(ph))
        prod = {n: float(v) for n, v in thermo.complete_products(b).items() if float(v) > 0}
        low, high, M = thermo.mixture_nasa7(prod)
        R[i, 1] = thermo.R_U / M
        coef[i, 1] = _u_polynomial(low, high, R[i, 1])
    return PipeGas(coef, R, thermo.T_MID, 6)
