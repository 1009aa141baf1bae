"""The two-zone solve at many points (a finished trace), one source, compiled or plain.

:func:`cylinder_zones_points` runs :func:`cyclesim.loops.zone_solve.cylinder_zones` point by point
on floats, as the compiled cycle loop does at each evaluation, instead of on whole arrays: each
point stops its Newton passes at its own tolerance rather than at the slowest point's, and the
gas look-ups are the compiled loop's.  Loaded by :func:`cyclesim.loops.kernel_copy.kernels`
(numba where it runs); :func:`cyclesim.loops.zones.cylinder_zones` calls it for arrays of
:data:`MIN_POINTS` points and more.  SI units.
"""

from __future__ import annotations

from .zone_solve import cylinder_zones

if "jit" not in globals():          # the plain form; the compiled loader sets both first
    def jit(fn):
        return fn

    mix_at = None
    """The scalar gas look-up (set by :func:`cyclesim.loops.kernel_copy.kernels`; unused here)."""

MIN_POINTS = 64
"""Fewest points for which the compiled point loop replaces the array evaluation."""


@jit
def cylinder_zones_points(gt, off, gc, nRm1, uc4, phi_f, phi_r, n_phi, T0_phi, dT_phi, R_f, R_r, case,
                          m, V, U, m_b, m_bz, s_u, p1, T, T_ivc, p_ivc, closed, p_out, T_u_out, T_b_out):
    """:func:`cyclesim.loops.zone_solve.cylinder_zones` at N points (flat arrays), point k with case
    ``case[k]``'s gas tables (``gt, off, gc, nRm1, uc4``: :meth:`GasTables._compiled_consts`) and
    entropy tables (``phi_f, phi_r`` flat, ``n_phi`` values per case from ``T0_phi`` in steps
    ``dT_phi`` [K]; ``R_f, R_r`` (B,) [J/(kg K)]); fills the pressure [Pa] and zone temperatures [K]."""
    for k in range(m.shape[0]):
        b = case[k]
        p, T_u, T_b, _, _, _ = cylinder_zones(
            (gt, off[b], gc, nRm1, uc4, b), phi_f, phi_r, b * n_phi, T0_phi, dT_phi, n_phi, R_f[b], R_r[b],
            m[k], V[k], U[k], m_b[k], m_bz[k], s_u[k], p1[k], T[k], T_ivc[k], p_ivc[k], closed[k])
        p_out[k] = p
        T_u_out[k] = T_u
        T_b_out[k] = T_b
