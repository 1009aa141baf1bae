"""Compressible flow through a restriction (valve, ring gap, orifice).

Pure, vectorised functions: every argument may be a scalar or an array, and
all broadcast together.  Used by the ring-leakage and valve-flow submodels.
"""

from __future__ import annotations

import numpy as np

from ..kernel_ops import critical_ratio_of, isentropic_flux, orifice_flow, outflow  # noqa: F401 - the kernels, re-exported

DP_LIN_DEFAULT = 1e-3
"""Default relative pressure difference below which the flow law is linear [-]."""


def critical_pressure_ratio(gamma):
    """Downstream/upstream pressure ratio at which the flow chokes [-].

    Parameters
    ----------
    gamma : array_like
        Ratio of specific heats of the upstream gas [-].

    Returns
    -------
    ndarray
        ``(2 / (gamma + 1)) ** (gamma / (gamma - 1))`` (Heywood 1988, App. C);
        0.5283 at gamma = 1.4.
    """
    g = np.asarray(gamma, dtype=float)
    return (2.0 / (g + 1.0)) ** (g / (g - 1.0))


def flow_function(pressure_ratio, gamma):
    """Dimensionless mass flux of isentropic flow through a nozzle [-].

    ``psi = mdot sqrt(R T0) / (CdA p0)`` as a function of the ratio of
    throat (downstream) to stagnation (upstream) pressure.

    Parameters
    ----------
    pressure_ratio : array_like
        Downstream / upstream pressure, 0..1 [-].  Values below the critical
        ratio give the choked value; values above 1 are treated as 1 (no flow).
    gamma : array_like
        Ratio of specific heats of the upstream gas [-].

    Returns
    -------
    ndarray
        ``psi`` [-]: subsonic
        ``pr^(1/g) sqrt(2g/(g-1) (1 - pr^((g-1)/g)))``, choked
        ``sqrt(g) (2/(g+1))^((g+1)/(2(g-1)))`` (Heywood 1988, App. C).
    """
    return isentropic_flux(np.asarray(pressure_ratio, dtype=float), np.asarray(gamma, dtype=float))


def orifice_mass_flow(cd_area, p1, T1, R1, gamma1, p2, T2, R2, gamma2, dp_lin=DP_LIN_DEFAULT):
    """Signed mass flow from side 1 to side 2 through an orifice [kg/s].

    The upstream side is chosen by the sign of ``p1 - p2``; its stagnation
    state sets the flow (the downstream side contributes only its pressure).

    Parameters
    ----------
    cd_area : array_like
        Effective flow area, discharge coefficient times reference area [m^2].
    p1, T1 : array_like
        Pressure [Pa] and temperature [K] on side 1.
    R1, gamma1 : array_like
        Gas constant [J/(kg K)] and ratio of specific heats [-] on side 1.
    p2, T2, R2, gamma2 : array_like
        The same on side 2 [Pa, K, J/(kg K), -].
    dp_lin : float, optional
        Relative pressure difference ``|p1 - p2| / p_upstream`` below which
        the flow is linear in the pressure difference [-].  Default 1e-3.

    Returns
    -------
    ndarray
        Mass flow [kg/s], positive from 1 to 2, negative from 2 to 1; shape of
        the broadcast arguments.

    Notes
    -----
    Isentropic compressible flow (Heywood 1988, App. C): subsonic

    ``mdot = CdA p0 / sqrt(R T0) (pT/p0)^(1/g) sqrt(2g/(g-1) (1 - (pT/p0)^((g-1)/g)))``

    and choked, for ``pT/p0 <= (2/(g+1))^(g/(g-1))``,

    ``mdot = CdA p0 / sqrt(R T0) sqrt(g) (2/(g+1))^((g+1)/(2(g-1)))``.

    Near zero pressure difference the subsonic law behaves as the square root
    of ``dp``: its slope is unbounded and explicit integrators chatter.  For
    ``x = |p1 - p2| / p0 < dp_lin`` the flow is therefore taken linear in
    ``x``, ``mdot = mdot_subsonic(x = dp_lin) * x / dp_lin``, which is
    continuous with the subsonic law at the threshold and zero at equal
    pressures.  With the default 1e-3 the flux in the linear band stays
    below 7 % of the choked value (at gamma = 1.4), so the mass it moves is
    negligible while the slope d(mdot)/d(dp) stays finite.  Requires
    ``dp_lin`` well below ``1 - critical ratio`` (about 0.47).
    """
    return orifice_flow(np.asarray(cd_area, dtype=float), np.asarray(p1, dtype=float), T1, R1,
                        np.asarray(gamma1, dtype=float), np.asarray(p2, dtype=float), T2, R2,
                        np.asarray(gamma2, dtype=float), dp_lin)


def orifice_outflow(cd_area, p1, T1, R1, gamma1, p2, dp_lin=DP_LIN_DEFAULT):
    """Mass flow from side 1 to side 2 [kg/s], zero when ``p2 >= p1`` (one-way restriction).

    The same law as :func:`orifice_mass_flow` with side 1 upstream; equal to
    ``max(orifice_mass_flow(...), 0)`` for any state of side 2.

    Parameters
    ----------
    cd_area : array_like
        Effective flow area [m^2].
    p1, T1, R1, gamma1 : array_like
        Upstream pressure [Pa], temperature [K], gas constant [J/(kg K)], ratio of specific heats [-].
    p2 : array_like
        Downstream pressure [Pa].
    dp_lin : float, optional
        Width of the linear band at small pressure differences [-] (see :func:`orifice_mass_flow`).
    """
    p1 = np.asarray(p1, dtype=float)
    pd = np.minimum(p1, np.asarray(p2, dtype=float))
    return _outflow(cd_area, p1, T1, R1, gamma1, pd, dp_lin)


def _outflow(cd_area, p0, T0, R0, g0, pd, dp_lin):
    """Isentropic orifice flow [kg/s] from stagnation ``p0, T0`` to ``pd <= p0`` (arrays)."""
    return outflow(np.asarray(cd_area, dtype=float), p0, T0, R0, np.asarray(g0, dtype=float), pd, dp_lin)


def turbine_outlet_temperature(T3, expansion_ratio, eta_t, gamma):
    """Turbine outlet temperature T4 [K] and its isentropic value T4s [K].

    ``T4s = T3 (p4/p3)^((g-1)/g)`` with ``expansion_ratio = p3/p4``, and
    ``T4 = T3 - eta_t (T3 - T4s)`` (eta_t = (T3 - T4)/(T3 - T4s)).
    """
    g = np.asarray(gamma, float)
    T3 = np.asarray(T3, float)
    T4s = T3 * np.asarray(expansion_ratio, float) ** (-(g - 1) / g)
    return T3 - eta_t * (T3 - T4s), T4s
