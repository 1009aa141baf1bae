"""Constant-pressure junction of several pipe ends (numpy, vectorised over cases).

Model (Benson 1982, *The Thermodynamics and Gas Dynamics of Internal-Combustion
Engines*, vol. 1, ch. 4; from memory): every branch meets the junction at one
static pressure ``p_J``, the junction stores no mass, and each branch follows its
outgoing characteristic ``v + 2c/(gamma-1)`` (``v`` towards the junction) with
its own entropy.  ``p_J`` solves the mass balance by bisection in ln p.  Branches
that flow into the junction give their stagnation enthalpy and burned fraction;
branches that flow out of it receive the mass-weighted mixture of those, with
their masses scaled so the balance closes to rounding.  No losses (pressure
loss coefficients of real junctions are left out); a linear wave from branch 1
is transmitted with the pressure amplitude ``2 A_1 / sum(A)`` (the acoustic
limit, checked in the tests).
"""

from __future__ import annotations

import numpy as np

import cyclesim.pipes.kernels as k


def _branch(p, rho, p_i, c_i, lam, g, area):
    c_b = c_i * (p / p_i) ** (0.5 * (g - 1.0) / g)
    v = lam - 2.0 * c_b / (g - 1.0)
    rho_b = rho * (p / p_i) ** (1.0 / g)
    return rho_b * v * area, rho_b, v


def junction_fluxes(rho, v_in, p, Y, area, gas_coef, R, t_mid, bisections=48):
    """Fluxes into the junction from each branch end.

    Parameters
    ----------
    rho, v_in, p, Y : ndarray (B, K)
        Face state at each branch's end: density [kg/m^3], velocity towards the
        junction [m/s], pressure [Pa], burned fraction [-].
    area : ndarray (B, K)
        Branch end areas [m^2].
    gas_coef, R : ndarray
        The pipes' gas (:class:`cyclesim.pipes.PipeGas` ``coef`` (B, 2, 2, 6), ``R`` (B, 2)).
    t_mid : float
        Range switch of the gas polynomials [K].

    Returns
    -------
    dict
        ``pressure_pa`` (B,); per branch (B, K), into the junction: ``mass_kg_s``,
        ``energy_W``, ``burned_kg_s``; ``velocity_m_s`` (towards the junction) and
        ``density_kg_m3`` of the branch end states.  Each sum over branches is zero
        to rounding.
    """
    cf = np.moveaxis(gas_coef[:, 0], 0, -1)[..., None]
    cb = np.moveaxis(gas_coef[:, 1], 0, -1)[..., None]
    Rf, Rb = R[:, :1], R[:, 1:]
    Rm = k.mixture_R(Y, Rf, Rb)
    T = p / (rho * Rm)
    e, cv = k.energy(T, Y, cf, cb, t_mid)
    g = (cv + Rm) / cv
    c_i = np.sqrt(g * p / rho)
    lam = v_in + 2.0 * c_i / (g - 1.0)
    inv_k = 2.0 * g / (g - 1.0)
    p_lo = p * (np.maximum(lam * (g - 1.0) / (g + 1.0), 1e-3 * c_i) / c_i) ** inv_k
    p_hi = p * (np.maximum(0.5 * lam * (g - 1.0), 1e-3 * c_i) / c_i) ** inv_k
    lo = np.log(p_lo.max(axis=1))          # every branch at or above its sonic state
    hi = np.log(np.maximum(p_hi.max(axis=1), 1.000001 * np.exp(lo)))
    for _ in range(bisections):
        mid = 0.5 * (lo + hi)
        G, _, _ = _branch(np.exp(mid)[:, None], rho, p, c_i, lam, g, area)
        pos = G.sum(axis=1) > 0.0                # more arrives than leaves: raise the pressure
        lo = np.where(pos, mid, lo)
        hi = np.where(pos, hi, mid)
    pj = np.exp(0.5 * (lo + hi))
    G, rho_b, v_b = _branch(pj[:, None], rho, p, c_i, lam, g, area)
    T_b = pj[:, None] / (rho_b * Rm)
    e_b, _ = k.energy(T_b, Y, cf, cb, t_mid)
    h0 = e_b + pj[:, None] / rho_b + 0.5 * v_b * v_b
    arriving = G > 0.0
    m_in = np.where(arriving, G, 0.0).sum(axis=1, keepdims=True)
    m_out = np.where(arriving, 0.0, G).sum(axis=1, keepdims=True)       # <= 0
    scale = np.where(m_out < 0.0, -m_in / np.where(m_out < 0.0, m_out, 1.0), 0.0)
    mass = np.where(arriving, G, G * scale)
    H_in = np.where(arriving, G * h0, 0.0).sum(axis=1, keepdims=True)
    Yin = np.where(arriving, G * Y, 0.0).sum(axis=1, keepdims=True)
    share = np.where(arriving, 0.0, mass / np.where(m_in > 0.0, -m_in, -1.0))   # outgoing shares, sum 1
    energy = np.where(arriving, G * h0, -share * H_in)
    burned = np.where(arriving, G * Y, -share * Yin)
    return {"pressure_pa": pj, "mass_kg_s": mass, "energy_W": energy, "burned_kg_s": burned,
            "velocity_m_s": v_b, "density_kg_m3": rho_b}
