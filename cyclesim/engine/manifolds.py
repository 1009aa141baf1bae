"""The shared intake and exhaust manifolds of a multi-cylinder engine: lumped volumes filled and emptied by the cylinders and by orifice flow through throttle and tail pipe."""

from __future__ import annotations

import math

import numpy as np

from ..cylinder.flow import DP_LIN_DEFAULT
from ..loops import filling
from .setup import throttle_area


R_AIR = 287.0
"""Gas constant of the intake air used by the throttle flow [J/(kg K)] (common practice)."""
GAMMA_AIR = 1.4
GAMMA_EXHAUST = 1.33
"""Ratio of specific heats of exhaust gas at manifold temperatures (common practice)."""
MANIFOLD_STEP_DEG = 1.0
"""Crank step of the manifold filling-and-emptying integration [deg]."""


# -- manifolds ----------------------------------------------------------------------


def supply_pressure_bar(ms) -> float:
    """Air pressure ahead of the throttle [bar]: ``intake_supply_pressure_bar``, else ambient."""
    v = ms.intake_supply_pressure_bar
    return float(ms.ambient_pressure_bar if v is None else v)


class _Manifolds:
    """Periodic filling-and-emptying of the coupled engines' manifolds, vectorised over engines."""

    def __init__(self, engines: list, step: float):
        self.E = len(engines)
        self.h = step
        self.n = int(round(720.0 / step))
        self.phi = -360.0 + step * np.arange(self.n + 1)
        e0 = engines
        self.p_amb = np.array([e["ms"].ambient_pressure_bar * 1e5 for e in e0])
        # the air ahead of the throttle: ambient, or the charge air of a boosted engine
        self.p_sup = np.array([supply_pressure_bar(e["ms"]) * 1e5 for e in e0])
        self.T_amb = np.array([e["T_int"] for e in e0])
        self.T_int = self.T_amb.copy()
        self.T_exh = np.array([e["T_exh"] for e in e0])
        self.R_int = np.array([e["R_int"] for e in e0])
        self.R_exh = np.array([e["R_exh"] for e in e0])
        self.V_i = np.array([e.get("V_int_L", e["ms"].intake_manifold_volume_L) * 1e-3 for e in e0])
        ms = [e["ms"] for e in e0]
        self.A_thr = np.array([m.throttle_discharge_coefficient * throttle_area(
            m.throttle_diameter_mm * 1e-3, m.throttle_angle_deg, m.throttle_closed_angle_deg) for m in ms])
        self.omega = np.array([6.0 * e["speed_rpm"] for e in e0])   # deg/s
        # exhaust: one row per branch of each engine; a branch has its cylinders' share of the
        # manifold volume and of the restriction's area
        rows, self.ex_rows = [], []
        for j, e in enumerate(e0):
            br = np.asarray(e.get("branches", (0,)), dtype=int)
            self.ex_rows.append([])
            for b in range(int(br.max()) + 1):
                share = float(np.sum(br == b)) / len(br)
                self.ex_rows[j].append(len(rows))
                rows.append((j, share))
        ej = np.array([r[0] for r in rows], dtype=int)
        share = np.array([r[1] for r in rows])
        self.V_e = np.array([e0[j].get("V_exh_L", e0[j]["ms"].exhaust_manifold_volume_L) * 1e-3
                             for j in ej]) * share
        self.A_out = np.array([0.25 * math.pi * (e0[j]["ms"].exhaust_outlet_diameter_mm * 1e-3) ** 2
                               for j in ej]) * share
        self.X = len(rows)
        self.T_exh_x, self.R_exh_x = self.T_exh[ej], self.R_exh[ej]
        self.p_amb_x, self.T_amb_x, self.omega_x = self.p_amb[ej], self.T_amb[ej], self.omega[ej]

    def q_throttle(self, p):
        """Throttle flow into the intake manifold [kg/deg] (E,)."""
        return self.q_throttle_rows(p, slice(None))

    def q_outlet(self, p):
        """Flow out of each exhaust branch to ambient [kg/deg] (X,)."""
        return self.q_outlet_rows(p, slice(None))

    def q_throttle_rows(self, p, rows):
        """Throttle flow [kg/deg] of some engines (``rows`` a slice) at pressure p."""
        return filling.boundary_flow(True, self.A_thr[rows], p, self.T_int[rows], R_AIR, GAMMA_AIR, self.p_sup[rows],
                                     self.T_amb[rows], R_AIR, GAMMA_AIR, self.omega[rows], DP_LIN_DEFAULT)

    def q_outlet_rows(self, p, rows):
        """Exhaust outlet flow [kg/deg] of some exhaust branches (``rows``) at pressure p."""
        return filling.boundary_flow(False, self.A_out[rows], p, self.T_exh_x[rows], self.R_exh_x[rows],
                                     GAMMA_EXHAUST, self.p_amb_x[rows], self.T_amb_x[rows], R_AIR, GAMMA_AIR,
                                     self.omega_x[rows], DP_LIN_DEFAULT)

    def _periodic(self, p0, lap, tol=1e-7, laps=4):
        """Periodic solution p(phi) by secant iteration on the start value; ``lap(p0)`` -> one lap."""
        a = p0.copy()
        ga = lap(a)
        b = ga[:, -1].copy()
        gb = lap(b)
        for _ in range(laps):
            ra = ga[:, -1] - a
            rb = gb[:, -1] - b
            if np.all(np.abs(rb) < tol * b):
                break
            den = rb - ra
            c = np.where(np.abs(den) > 1e-300, b - rb * (b - a) / np.where(den == 0, 1.0, den), gb[:, -1])
            c = np.clip(c, 0.5 * b, 2.0 * b)
            a, ga = b, gb
            b = c
            gb = lap(b)
        return gb

    def laps(self, Qi, pref_i, Qe, pref_e=None, Z_i=None, Z_e=None, shift_i=None, shift_e=None):
        """The two lap functions ``p0 -> (rows, n+1)`` [Pa] of the intake volumes (E rows) and the
        exhaust branches (X rows), for the cylinders' flows per interval [kg/deg] ``Qi`` (E, n) and
        ``Qe`` (X, n) seen at the pressures ``pref_i``, ``pref_e`` [Pa] (rows, n).

        ``Z_i``, ``Z_e`` (rows,) [kg/(Pa deg)]: the admittance of runners meeting the volumes, and
        ``shift_i``, ``shift_e`` (rows,) [Pa] the laps' mean of ``p - pref``
        (:func:`cyclesim.loops.filling.pressure_rate`); left out, they are 0 (lumped cylinders'
        flows) and ``pref_e`` is unused.

        The laps are :func:`cyclesim.loops.filling.lap`, compiled where kernels compile (one call
        per lap), else run on the rows' arrays."""
        import cyclesim.solve.kernel as kernel

        mod = kernel.compiled_module()
        run_lap = filling.lap if mod is None else mod.manifold_lap
        f64 = lambda a: np.ascontiguousarray(a, dtype=float)  # noqa: E731
        zero_i, zero_e = np.zeros(self.E), np.zeros(self.X)
        ki = f64(self.R_int * self.T_int / self.V_i)
        ke = f64(self.R_exh_x * self.T_exh_x / self.V_e)
        Qi_, pr_, Qe_ = f64(Qi), f64(pref_i), f64(Qe)
        pe_ = Qe_ if pref_e is None else f64(pref_e)
        Zi_, Ze_ = (zero_i if Z_i is None else f64(Z_i)), (zero_e if Z_e is None else f64(Z_e))
        si_, se_ = (zero_i if shift_i is None else f64(shift_i)), (zero_e if shift_e is None else f64(shift_e))
        R_int = np.full(self.E, R_AIR)
        dp = 1.0

        def lap_i(p0):      # the throttle fills the manifold with air from the supply
            return run_lap(f64(p0), self.h, ki, f64(self.A_thr), f64(self.T_int), R_int, GAMMA_AIR,
                           f64(self.p_sup), f64(self.T_amb), R_AIR, GAMMA_AIR, f64(self.omega), Qi_, pr_, Zi_, si_,
                           True, dp, DP_LIN_DEFAULT)

        def lap_e(p0):      # the outlet empties the branch to ambient
            return run_lap(f64(p0), self.h, ke, f64(self.A_out), f64(self.T_exh_x), f64(self.R_exh_x),
                           GAMMA_EXHAUST, f64(self.p_amb_x), f64(self.T_amb_x), R_AIR, GAMMA_AIR,
                           f64(self.omega_x), Qe_, pe_, Ze_, se_, False, dp, DP_LIN_DEFAULT)

        return lap_i, lap_e

    def solve(self, Qi, pref_i, Qe, p0_i, p0_e):
        """Periodic manifold pressures [Pa]: intake (E, n+1) and exhaust branches (X, n+1), for the
        cylinder flows per interval [kg/deg]: ``Qi`` (E, n), ``Qe`` (X, n) (:meth:`laps`)."""
        lap_i, lap_e = self.laps(Qi, pref_i, Qe)
        return self._periodic(p0_i, lap_i), self._periodic(p0_e, lap_e)


def _periodic_interp(x_new, x, y):
    """Linear interpolation of y(x) (periodic over 720 deg, x ascending over one period)."""
    return np.interp(((x_new - x[0]) % 720.0) + x[0], x, y, period=720.0)
