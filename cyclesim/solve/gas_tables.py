"""The cycle solver's gas tables: the cylinder gas as a mass-weighted mix of fresh charge
(mass fraction ``1 - y``) and burned gas (``y``: the products of that same fresh charge,
residual and EGR counted as burned), burned-gas properties tabulated over temperature and
density from :mod:`cyclesim.gas.equilibrium` (or the complete-combustion products).

Energies are absolute (formation enthalpy included, the datum of :mod:`cyclesim.gas.thermo`);
units are SI and per unit mass [J/kg, J/(kg K)].
"""

from __future__ import annotations

import functools
from collections import namedtuple
from typing import Mapping

import numpy as np

from ..errors import ConfigError
from ..kernel_ops import along_lnrho, blend, fresh_charge_poly, frozen_cp_gamma, hermite_cubic, table_coords
from ..params import suggestion
from ..gas.equilibrium import SPECIES, equilibrate_tv, equilibrium_properties
from ..gas.thermo import (R_U,
    T_MID,
    T_REF,
    complete_products,
    fresh_charge,
    fresh_charge_elements,
    heating_value_CO_H2,
    mixture_nasa7,
    species_h_mole,
    species_thermo_dimless)


# ----------------------------------------------------------------------------
# 3. Tables for the solver
# ----------------------------------------------------------------------------
MixProps = namedtuple(
    "MixProps", "u u_T u_lnrho u_y R R_T R_lnrho R_y cv cp gamma"
)
MixProps.__doc__ = """Cylinder-gas properties at (T, rho, y), all arrays of the input shape.

u [J/kg] absolute internal energy and its partial derivatives u_T [J/(kg K)]
(constant rho and y), u_lnrho [J/kg] (constant T, y), u_y [J/kg] (= u_b - u_u);
R [J/(kg K)] gas constant and R_T, R_lnrho, R_y likewise; cv = u_T (equilibrium
value at constant density), cp = cv + R (frozen approximation) [J/(kg K)],
gamma = cp/cv [-].
"""

T_GRID = (200.0, 4000.0, 20.0)
"""Temperature nodes of the burned-gas tables: first, last, step [K]."""

RHO_GRID = (0.005, 400.0, 40)
"""Density nodes of the burned-gas tables: first, last [kg/m^3], count (uniform in ln rho)."""

BURNED_MODELS = ("equilibrium", "complete")


class _CaseTable:
    """Everything that depends on one (fuel, phi, burned model): built once, shared."""

    def __init__(self, fuel: "Fuel", phi: float, model: str) -> None:

        self.phi = phi
        n = fresh_charge(fuel, phi)
        rec = {"FUEL": fuel.nasa7[:5] + ({"C": fuel.C, "H": fuel.H, "O": fuel.O, "N": fuel.N},)}
        low, high, M_u = mixture_nasa7(n, rec)
        b, y_fuel = fresh_charge_elements(fuel, phi)
        self.R_u = R_U / M_u
        self.y_fuel = y_fuel
        self.b = b
        # u(T) = R (a6 + (a1-1) T + a2 T^2/2 + a3 T^3/3 + a4 T^4/4 + a5 T^5/5)
        def u_poly(a):
            return self.R_u * np.array(
                [a[5], a[0] - 1.0, a[1] / 2, a[2] / 3, a[3] / 4, a[4] / 5]
            )

        self.u_coef = np.stack([u_poly(low), u_poly(high)])  # (2, 6)
        self.cv_coef = np.stack(  # derivative of the u polynomial, padded to 6
            [np.append(c[1:] * np.arange(1, 6), 0.0) for c in self.u_coef]
        )
        self.h298_u = float(_poly_u(self.u_coef, self.cv_coef, np.array([T_REF]))[0][0]
                            + self.R_u * T_REF)
        prod = complete_products(b)
        names = list(prod)
        amounts = np.array([float(prod[k]) for k in names])
        hs = np.array([float(species_h_mole(k, T_REF)) for k in names])
        self.h298_b = float(amounts @ hs)
        lhv_co, lhv_h2 = heating_value_CO_H2()
        self.chem_b_co = float(prod["CO"]) * lhv_co
        self.chem_b_h2 = float(prod["H2"]) * lhv_h2
        self.chem_b = self.chem_b_co + self.chem_b_h2
        self.lhv = fuel.lhv_J_per_kg
        self.afr_stoich = fuel.afr_stoich
        self.complete = {k: float(v) for k, v in prod.items()}

        # burned-gas node values: u, u_T, R, R_T on the (T, ln rho) grid
        T0, T1, dT = T_GRID
        nT = int(round((T1 - T0) / dT)) + 1
        Tn = T0 + dT * np.arange(nT)
        r0, r1, nR = RHO_GRID
        lnr = np.linspace(np.log(r0), np.log(r1), nR)
        TT, LR = np.meshgrid(Tn, lnr, indexing="ij")
        if model == "equilibrium":
            props = equilibrium_properties(TT.ravel(), np.exp(LR.ravel()), b)
            u, uT, R, RT = (props[k].reshape(nT, nR) for k in ("u", "u_T", "R", "R_T"))
        else:
            u, uT, R = _fixed_composition_u(self.complete, TT)
            RT = np.zeros_like(u)
        # cubic Hermite on each T interval, in the local variable t = (T - T_i)/dT:
        # value = c0 + c1 t + c2 t^2 + c3 t^3 from values and slopes at both ends;
        # d value/dT = (c1 + 2 c2 t + 3 c3 t^2)/dT
        val = np.empty((nT - 1, nR, 4, 4))  # (interval, rho node, [u, R, u_T, R_T], power)
        for q, (f, fT) in enumerate(((u, uT), (R, RT))):
            f0, f1 = f[:-1], f[1:]
            m0, m1 = fT[:-1] * dT, fT[1:] * dT
            c2 = 3 * (f1 - f0) - 2 * m0 - m1
            c3 = 2 * (f0 - f1) + m0 + m1
            val[:, :, q] = np.stack([f0, m0, c2, c3], axis=-1)
            val[:, :, q + 2] = np.stack([m0, 2 * c2, 3 * c3, np.zeros_like(c3)], axis=-1) / dT
        dlr = float(lnr[1] - lnr[0])
        # per (interval, density interval): the corner at node j and the slope
        # in ln(rho) towards node j+1, so that one gather and one product give
        # [u, R, u_T, R_T] = base + (ln rho - ln rho_j) * slope
        self.table = np.concatenate(
            [val[:, :-1], (val[:, 1:] - val[:, :-1]) / dlr], axis=2
        ).reshape((nT - 1) * (nR - 1), 32)
        self.shape = (nT, nR)
        self.grid = (T0, dT, float(lnr[0]), float(lnr[1] - lnr[0]))


def _poly_u(u_coef, cv_coef, T):
    """u [J/kg] and cv [J/(kg K)] of a fixed-composition mixture, T any shape, by Horner's rule.

    Used once per table for the datum ``h298_u``; the solver's lookups evaluate the same
    polynomial by :func:`cyclesim.kernel_ops.fresh_charge_poly` (rising powers, the compiled
    loop's order).  The two orders differ by rounding only; this one is kept so that the datum,
    and with it every figure, stays as it was to the last digit."""
    T = np.asarray(T, dtype=float)
    hi = (T > T_MID)[..., None]
    cu = np.where(hi, u_coef[1], u_coef[0])
    cc = np.where(hi, cv_coef[1], cv_coef[0])
    u = cu[..., 5]
    cv = cc[..., 4]
    for i in (4, 3, 2, 1, 0):
        u = u * T + cu[..., i]
    for i in (3, 2, 1, 0):
        cv = cv * T + cc[..., i]
    return u, cv


def _fixed_composition_u(amounts: Mapping[str, float], T):
    """u [J/kg], u_T [J/(kg K)], R [J/(kg K)] of gas with fixed amounts [mol/kg]."""
    names = [k for k, v in amounts.items() if v > 0]
    n = np.array([amounts[k] for k in names])
    cp, h, _ = species_thermo_dimless(names, T)
    T = np.asarray(T, dtype=float)
    u = R_U * T * ((h - 1.0) @ n)
    cv = R_U * ((cp - 1.0) @ n)
    R = np.full(T.shape, R_U * n.sum())
    return u, cv, R


@functools.lru_cache(maxsize=256)
def _case_table(fuel: "Fuel", phi: float, model: str) -> _CaseTable:
    return _CaseTable(fuel, phi, model)


class GasTables:
    """Fresh-charge and burned-gas properties of a batch of B cases.

    Built by :func:`build_gas_tables`.  Per-case attributes are arrays (B,):

    phi [-] equivalence ratio; y_fuel [-] fuel mass fraction of the fresh
    charge; lhv [J/kg fuel] fuel lower heating value; lhv_mix [J/kg fresh
    charge] = y_fuel * lhv; afr_stoich [-]; h298_u [J/kg] absolute enthalpy of
    the fresh charge at 298.15 K; h298_b [J/kg] that of its complete-combustion
    products (water-gas shift at :data:`K_WGS_COMPLETE` when rich); chem_b
    [J/kg] chemical energy left in those products (CO and H2), zero for
    phi <= 1, and its parts chem_b_co, chem_b_h2 [J/kg]; so h298_u - h298_b = lhv_mix - chem_b; R_unburned [J/(kg K)].

    Notes
    -----
    Burned-gas properties come from per-case tables on a uniform temperature
    grid (:data:`T_GRID`) times a uniform ln(rho) grid (:data:`RHO_GRID`),
    holding u, du/dT, R, dR/dT at the nodes (the equilibrium derivatives
    include the composition shift).  Evaluation is cubic Hermite in T and
    linear in ln(rho); returned derivatives are the exact derivatives of that
    interpolant, so u is C1 in T and u_T is consistent with u.  T and rho
    are clipped to the table range.  Fresh-charge properties are evaluated
    from the mixture polynomial directly.
    """

    def __init__(self, fuel: "Fuel", phi: np.ndarray, model: str, cases: list[_CaseTable]) -> None:
        self.fuel = fuel
        self.burned_model = model
        self.B = len(cases)
        self.phi = np.asarray(phi, dtype=float).copy()
        uniq: dict[int, int] = {}
        tabs: list[_CaseTable] = []
        which = np.empty(self.B, dtype=np.intp)
        for i, c in enumerate(cases):
            if id(c) not in uniq:
                uniq[id(c)] = len(tabs)
                tabs.append(c)
            which[i] = uniq[id(c)]
        self._cases = cases
        self.y_fuel = np.array([c.y_fuel for c in cases])
        self.lhv = np.array([c.lhv for c in cases])
        self.lhv_mix = self.y_fuel * self.lhv
        self.h298_u = np.array([c.h298_u for c in cases])
        self.h298_b = np.array([c.h298_b for c in cases])
        self.chem_b = np.array([c.chem_b for c in cases])
        self.chem_b_co = np.array([c.chem_b_co for c in cases])
        self.chem_b_h2 = np.array([c.chem_b_h2 for c in cases])
        self.afr_stoich = np.array([c.afr_stoich for c in cases])
        self.R_unburned = np.array([c.R_u for c in cases])
        # fresh charge: per case [low u coefs | low cv coefs] and high, rows b*2 + (T > T_MID)
        self._ucoef = np.stack([np.stack([np.concatenate([c.u_coef[r], c.cv_coef[r]])
                                          for r in (0, 1)]) for c in cases]).reshape(2 * self.B, 12)
        # the same as one (2B, 6, 4) matrix: powers T^0..T^5 times it give [u, R, cv, 0]
        # of the fresh charge in one product (R as the constant term)
        uc4 = np.zeros((self.B, 2, 6, 4))
        for b, c in enumerate(cases):
            uc4[b, :, :, 0] = c.u_coef
            uc4[b, :, 0, 1] = c.R_u
            uc4[b, :, :, 2] = c.cv_coef
        self._uc4 = uc4.reshape(2 * self.B, 6, 4)
        self._row2 = 2 * np.arange(self.B)
        # burned gas: one flat table of all distinct case tables
        nT, nR = tabs[0].shape
        self._nT, self._nR = nT, nR
        self._T0, self._dT, self._lr0, self._dlr = tabs[0].grid
        self._inv_dT = 1.0 / self._dT
        self._inv_dlr = 1.0 / self._dlr
        self._table = np.concatenate([t.table for t in tabs])
        self._offset = which * ((nT - 1) * (nR - 1))
        self._T_hi = self._T0 + (nT - 1) * self._dT
        self._lr_hi = self._lr0 + (nR - 1) * self._dlr
        self._x_hi = (nT - 1) * (1.0 - 1e-12)  # top node reached as t -> 1 in the last interval
        self._z_hi = (nR - 1) * self._dlr * (1.0 - 1e-12)
        self.T_range = (self._T0, self._T_hi)
        self.rho_range = (float(np.exp(self._lr0)), float(np.exp(self._lr_hi)))

    @property
    def element_amounts(self) -> np.ndarray:
        """Element amounts of each case's charge [mol/kg] (B, 5), columns :data:`cyclesim.gas.thermo.ELEMENTS`."""
        return np.stack([c.b for c in self._cases])

    # -- fresh charge ------------------------------------------------------
    def unburned(self, T) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Fresh-charge (u [J/kg], cv [J/(kg K)], R [J/(kg K)]) at ``T`` [K] of shape (B,) or (B, n)."""
        T = np.asarray(T, dtype=float)
        if T.ndim == 1:
            U4 = self._unburned4(T)
            return U4[:, 0], U4[:, 2], self.R_unburned.copy()
        shape = T.shape
        T2 = T.reshape(self.B, -1)
        U4 = self._unburned_rows(T2.ravel(), (self._row2[:, None] + (T2 > T_MID)).ravel())
        return U4[:, 0].reshape(shape), U4[:, 2].reshape(shape), U4[:, 1].reshape(shape)

    def _unburned4(self, T: np.ndarray) -> np.ndarray:
        """[u, R, cv, 0] of the fresh charge at ``T`` [K] (B,) -> (B, 4)."""
        return self._unburned_rows(T, self._row2 + (T > T_MID))

    def _unburned_rows(self, T: np.ndarray, rows: np.ndarray) -> np.ndarray:
        """[u, R, cv, 0] (N, 4) at ``T`` (N,) with the coefficient rows ``rows`` (N,)."""
        # the coefficient blocks (6, 4, N): c[k, q] of every point
        u, R, cv = fresh_charge_poly(self._uc4[rows].transpose(1, 2, 0), T)
        out = np.empty((u.size, 4))
        out[:, 0] = u
        out[:, 1] = R
        out[:, 2] = cv
        out[:, 3] = 0.0
        return out

    def enthalpy_unburned(self, T) -> np.ndarray:
        """Absolute enthalpy of the fresh charge [J/kg] at ``T`` [K], shape (B,) or (B, n)."""
        u, _, R = self.unburned(T)
        return u + R * np.asarray(T, dtype=float)

    # -- burned gas --------------------------------------------------------
    def _burned_core(self, T, rho, offset=None):
        """[u, R, u_T, R_T] (N, 4) and [u_lnrho, R_lnrho] (N, 2) from the tables (T, rho (N,))."""
        # fmax/fmin map NaN (a state out of range) into the table, so the lookup stays valid and
        # the caller sees the non-finite input in its own results
        x, z = table_coords(T, rho, self._T0, self._inv_dT, self._lr0, self._x_hi, self._z_hi)
        i = x.astype(np.intp)
        j = (z * self._inv_dlr).astype(np.intp)
        off = self._offset if offset is None else offset
        g = self._table[off + i * (self._nR - 1) + j].reshape(-1, 8, 4)
        # (N, 8): base [u, R, u_T, R_T], then slopes: the cell's cubics in t, all in one block
        v = hermite_cubic(g[:, :, 0], g[:, :, 1], g[:, :, 2], g[:, :, 3], (x - i)[:, None])
        s = v[:, 4:]
        f = along_lnrho(v[:, :4], s, (z - j * self._dlr)[:, None])
        return f, s

    def burned(self, T, rho):
        """Burned-gas properties at ``T`` [K] and ``rho`` [kg/m^3], arrays (B,) or (B, n).

        Returns
        -------
        u : ndarray
            Absolute internal energy [J/kg].
        u_T, u_lnrho : ndarray
            Its derivatives at constant rho [J/(kg K)] and at constant T [J/kg].
        R, R_T, R_lnrho : ndarray
            Gas constant [J/(kg K)] and its derivatives [J/(kg K^2)], [J/(kg K)].
        """
        T = np.asarray(T, dtype=float)
        rho = np.asarray(rho, dtype=float)
        if T.ndim == 1:
            f, s = self._burned_core(T, rho)
            return f[:, 0], f[:, 2], s[:, 0], f[:, 1], f[:, 3], s[:, 1]
        shape = T.shape  # (B, n): post-processing
        n = T.size // self.B
        f, s = self._burned_core(T.ravel(), np.broadcast_to(rho, shape).ravel(),
                                 np.repeat(self._offset, n))
        return tuple(a.reshape(shape) for a in (f[:, 0], f[:, 2], s[:, 0], f[:, 1], f[:, 3], s[:, 1]))

    def enthalpy_burned(self, T, rho) -> np.ndarray:
        """Absolute enthalpy of the burned gas [J/kg] at ``T`` [K], ``rho`` [kg/m^3]."""
        u, _, _, R, _, _ = self.burned(T, rho)
        return u + R * np.asarray(T, dtype=float)

    def mixture(self, T, rho, y) -> MixProps:
        """Cylinder-gas properties at ``T`` [K], ``rho`` [kg/m^3], burned mass fraction ``y`` [-] (B,)."""
        T = np.asarray(T, dtype=float)
        f, s = self._burned_core(T, np.asarray(rho, dtype=float))
        return _mix(f, s, self._unburned4(T), np.asarray(y, dtype=float))

    def mixture_grid(self, T, rho, y) -> MixProps:
        """As :meth:`mixture` for (B, n) arrays (a crank grid per case), in one pass."""
        T = np.asarray(T, dtype=float)
        B, n = T.shape
        return self.mixture_points(T, rho, y, np.broadcast_to(np.arange(B)[:, None], (B, n)))

    def mixture_points(self, T, rho, y, case=None) -> MixProps:
        """As :meth:`mixture` at N points of any shape; point k uses case ``case[k]``'s tables
        (default: case 0 for all, the single-case tables of the trace analyser).

        Compiled where numba is installed (:func:`cyclesim.loops._compiled.mixture_points`, three to
        five times faster per point), else the numpy evaluation; both give the same values to
        rounding (``tests/test_kernel.py``).
        """
        T = np.asarray(T, dtype=float)
        shape = T.shape
        Tf = T.ravel()
        rf = np.asarray(rho, dtype=float)
        rf = rf.ravel() if rf.shape == shape else np.broadcast_to(rf, shape).ravel()
        yf = np.asarray(y, dtype=float)
        yf = yf.ravel() if yf.shape == shape else np.broadcast_to(yf, shape).ravel()
        from .kernel import compiled_module

        mod = compiled_module()
        if mod is None or Tf.size < 64:
            cf = (np.zeros(Tf.size, dtype=np.intp) if case is None
                  else np.broadcast_to(np.asarray(case, dtype=np.intp), shape).ravel())
            f, s = self._burned_core(Tf, rf, self._offset[cf])
            mp = _mix(f, s, self._unburned_rows(Tf, 2 * cf + (Tf > T_MID)), yf)
            return MixProps(*(a.reshape(shape) for a in mp))
        consts = self._compiled_consts()
        cf = (np.zeros(Tf.size, dtype=np.int64) if case is None
              else np.ascontiguousarray(np.broadcast_to(np.asarray(case, dtype=np.int64), shape).ravel()))
        out = np.empty((11, Tf.size))
        mod.mixture_points(consts[0], consts[1], consts[2], consts[3], consts[4], cf, np.ascontiguousarray(Tf),
                           np.ascontiguousarray(rf), np.ascontiguousarray(yf), out)
        if len(shape) == 1:
            return MixProps(*out)
        return MixProps(*(a.reshape(shape) for a in out))

    def _compiled_consts(self) -> tuple:
        """The tables as the compiled lookup takes them (built once)."""
        got = getattr(self, "_consts", None)
        if got is None:
            from ..cylinder.flow import DP_LIN_DEFAULT

            gc = np.array([self._T0, self._inv_dT, self._lr0, self._inv_dlr, self._dlr, self._x_hi,
                           self._z_hi, T_MID, DP_LIN_DEFAULT])
            got = (np.ascontiguousarray(self._table), self._offset.astype(np.int64), gc, int(self._nR - 1),
                   np.ascontiguousarray(self._uc4))
            self._consts = got
        return got

    def pressure(self, T, rho, y) -> np.ndarray:
        """Pressure [Pa] = rho R(T, rho, y) T."""
        T = np.asarray(T, dtype=float)
        f, _ = self._burned_core(T, np.asarray(rho, dtype=float))
        R = self.R_unburned + y * (f[:, 1] - self.R_unburned)
        return rho * R * T

    def burned_mole_fractions(self, T, rho) -> dict[str, np.ndarray]:
        """Burned-gas mole fractions by species at ``T`` [K], ``rho`` [kg/m^3] (B,) or (B, n).

        Solved directly (not from the tables): meant for reports and tests.
        """

        T = np.asarray(T, dtype=float)
        rho = np.broadcast_to(np.asarray(rho, dtype=float), T.shape)
        shape = T.shape
        T2 = T.reshape(self.B, -1)
        r2 = rho.reshape(self.B, -1)
        if self.burned_model == "complete":
            out = {}
            tot = np.array([sum(c.complete.values()) for c in self._cases])
            for k in SPECIES:
                v = np.array([c.complete.get(k, 0.0) for c in self._cases]) / tot
                out[k] = np.broadcast_to(v[:, None], T2.shape).reshape(shape).copy()
            return out
        b = np.repeat(np.stack([c.b for c in self._cases]), T2.shape[1], axis=0)
        res = equilibrate_tv(T2.ravel(), r2.ravel(), b)
        x = res.n / res.n.sum(axis=1, keepdims=True)
        return {k: x[:, i].reshape(shape) for i, k in enumerate(SPECIES)}


def _mix(f: np.ndarray, s: np.ndarray, U: np.ndarray, y: np.ndarray) -> MixProps:
    """Mixture properties (N,) from the burned gas ``f`` = [u, R, u_T, R_T], its ln(rho)
    slopes ``s`` (N, 4), the fresh charge ``U`` = [u, R, cv, 0] (N, 4) and the burned fraction y."""
    D = f - U                               # [u_y, R_y, du_T, R_T of the burned gas]
    yc = y[:, None]
    M = blend(U, f, yc)                     # [u, R, u_T, R_T] of the mixture
    S = yc * s[:, :2]                       # [u_lnrho, R_lnrho]
    u_T = M[:, 2]
    cp, gamma = frozen_cp_gamma(u_T, M[:, 1])
    return MixProps(M[:, 0], u_T, S[:, 0], D[:, 0], M[:, 1], M[:, 3], S[:, 1], D[:, 1], u_T, cp, gamma)


def build_gas_tables(fuel: "Fuel", phi, burned_model: str = "equilibrium") -> GasTables:
    """Property tables of a batch's fresh charge and burned gas.

    Parameters
    ----------
    fuel : cyclesim.fuels.Fuel
        The fuel (one per batch).
    phi : array_like (B,)
        Fuel-air equivalence ratio per case [-].
    burned_model : {"equilibrium", "complete"}
        ``"equilibrium"``: burned gas in chemical equilibrium (dissociation) at
        the local T and density.  ``"complete"``: complete-combustion products
        (water-gas shift at :data:`K_WGS_COMPLETE` when rich), composition
        independent of T and rho.

    Notes
    -----
    Tables are cached by (fuel, phi, model): cases with equal phi share one build.
    """
    if burned_model not in BURNED_MODELS:
        raise ConfigError(
            f"burned-gas model {burned_model!r}: expected one of {', '.join(BURNED_MODELS)}"
            + suggestion(str(burned_model), BURNED_MODELS)
        )
    phi = np.atleast_1d(np.asarray(phi, dtype=float))
    if phi.ndim != 1 or not np.all(np.isfinite(phi)) or np.any(phi <= 0):
        raise ConfigError(f"equivalence ratio must be positive numbers, got {phi!r}")
    cases = [_case_table(fuel, float(p), burned_model) for p in phi]
    return GasTables(fuel, phi, burned_model, cases)
