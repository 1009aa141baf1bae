"""The cylinder's mass, energy and composition balance and the intake-port buffer, written once.

Kernel form (:mod:`cyclesim.kernel_ops`): plain elementwise arithmetic that the numpy loop
(:class:`cyclesim.solve.solver._RHS`) runs on arrays (B,) and the compiled loop (a module written by
:mod:`cyclesim.loops.loopgen` from :func:`cyclesim.loops._compiled._rhs`) on floats.  Every flow here is a
crank-angle rate [unit/deg]; energies are absolute (formation enthalpy included), so the first
law needs no separate heat-release term.

The first law of an open system of one zone (Heywood 1988, sec. 14.4, eqs. 14.32-14.36; common
practice for single-zone cycle models) with u(T, rho, y_b):

    dm   = sum of the mass flows in
    dm_b = burned-gas flows in + the charge burned
    dU   = sum h_in dm_in - p dV - dQ_w
    u_T dT = (dU - u dm) / m - u_lnrho dln(rho) - u_y dy_b
"""

from __future__ import annotations

import numpy as np

from ..kernel_ops import where


def port_buffer(fi, m_buf, mb_buf, H_buf, buf_scale, y_plenum, h_plenum, y_b, h):
    """The intake side: gas pushed back into the port returns first.

    ``fi`` [kg/deg] is the intake flow into the cylinder; the buffer holds ``m_buf`` [kg] of
    burned part ``mb_buf`` [kg] and enthalpy ``H_buf`` [J].  Inflow draws the share
    ``w = m_buf / (m_buf + buf_scale)`` from the buffer and the rest from the plenum (y_plenum,
    h_plenum); backflow carries the cylinder gas (y_b, h [J/kg]) into the buffer.

    Returns (y_in, h_in, d m_buf, d mb_buf, d H_buf): the burned fraction [-] and enthalpy
    [J/kg] of the gas the intake brings in, and the buffer's rates [kg/deg, kg/deg, J/deg].
    """
    mq = np.maximum(m_buf, 0.0)
    w = mq / (mq + buf_scale)
    mq_safe = where(mq > 0, mq, 1.0)
    yq = np.minimum(np.maximum(mb_buf / mq_safe, 0.0), 1.0)
    hq = H_buf / mq_safe
    inn = fi > 0
    y_in = where(inn, w * yq + (1.0 - w) * y_plenum, y_b)
    h_in = where(inn, w * hq + (1.0 - w) * h_plenum, h)
    wfi = w * fi
    # > 0 leaves the buffer; < 0 enters it
    return y_in, h_in, -where(inn, wfi, fi), -where(inn, wfi * yq, fi * y_b), -where(inn, wfi * hq, fi * h)


def plenum_inflow(fi, y_plenum, h_plenum, y_b, h):
    """The intake side without the port buffer: burned fraction [-] and enthalpy [J/kg] of the
    gas the intake brings in, the plenum's for inflow (``fi > 0``), the cylinder's own for
    backflow (which leaves the model: the plenum takes it at its fixed state)."""
    inn = fi > 0
    return where(inn, y_plenum, y_b), where(inn, h_plenum, h)


def exhaust_inflow(fe, h_exh, y_b, h):
    """Burned fraction [-] and enthalpy [J/kg] of the gas the exhaust valves bring in: the exhaust
    plenum's burned gas for inflow (``fe > 0``), the cylinder's own gas for outflow."""
    ine = fe > 0
    return where(ine, 1.0, y_b), where(ine, h_exh, h)


def first_law(m, V, dV, p, u, u_T, u_lnrho, u_y, y_b, h, dm_burn, fi, y_in_i, h_in_i, fe, y_in_e, h_in_e,
              fbb, dQ):
    """Rates of the cylinder state from its flows [per deg].

    Parameters: the state (m [kg], V [m^3], dV [m^3/deg], p [Pa], u [J/kg] and its slopes u_T,
    u_lnrho, u_y, y_b [-], h [J/kg]); the charge burned ``dm_burn`` [kg/deg]; the intake and
    exhaust flows into the cylinder fi, fe [kg/deg] with the burned fraction and enthalpy of
    what they bring in; the blowby fbb [kg/deg] (out, at the cylinder's state); the wall heat
    dQ [J/deg].

    Returns (dm, dT, dm_b, p dV, dH_bb, dH_int, dH_exh).
    """
    dHi = fi * h_in_i
    dHe = fe * h_in_e
    dm = fi + fe - fbb
    dmb = dm_burn + fi * y_in_i + fe * y_in_e - fbb * y_b
    dHbb = fbb * h
    pdV = p * dV
    dU = dHi + dHe - pdV - dQ - dHbb
    dlnrho = dm / m - dV / V
    dy = (dmb - y_b * dm) / m
    dT = ((dU - u * dm) / m - u_lnrho * dlnrho - u_y * dy) / u_T
    return dm, dT, dmb, pdV, dHbb, dHi, dHe


def burned_mass_rate(eta, dxb, x_b, m, m_b):
    """Charge burned [kg/deg] for a burn-progress rate ``dxb`` [1/deg]: the fraction ``eta dxb /
    (1 - eta x_b)`` of the *remaining* fresh charge ``m - m_b``, so leaked charge cannot burn
    twice; the floor 1e-3 of the denominator keeps the rate bounded where x_b reaches 1 between
    grid points (it only slows the last 0.1 % of a burn)."""
    return eta * dxb / np.maximum(1.0 - eta * x_b, 1e-3) * np.maximum(m - m_b, 0.0)
