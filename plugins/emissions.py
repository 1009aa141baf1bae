"""Emissions: none, or NO by the extended Zeldovich mechanism in burned-mass elements."""

from __future__ import annotations

import functools
from typing import Any, Mapping

import numpy as np

from cyclesim.gas import thermo
from cyclesim.combustion import burned_zones as bz
from cyclesim.combustion import zeldovich as z
from cyclesim.params import Param
from cyclesim.roles import Emissions, EmissionsResult

M_NO = 30.006e-3
"""Molar mass of NO [kg/mol] (14.007 + 15.999 g/mol, IUPAC standard atomic weights)."""

NO_TABLE_T_K = np.arange(1300.0, 3601.0, 50.0)
"""Temperature nodes of the NO tables [K]."""
NO_TABLE_P_PA = np.geomspace(1e5, 300e5, 16)
"""Pressure nodes of the NO tables [Pa]."""


@functools.lru_cache(maxsize=64)
def _table(b: tuple) -> tuple:
    return z.no_table(np.array(b), NO_TABLE_T_K, NO_TABLE_P_PA)


def tables_for(gas) -> tuple:
    """Per-case Zeldovich tables ``(Tg, lpg, ln_w (B, nT, np), ln_K, ln_ne)`` of a batch's charges."""
    tabs = [_table(tuple(float(v) for v in b)) for b in gas.element_amounts]
    return (tabs[0][0], tabs[0][1]) + tuple(np.stack([t[k] for t in tabs]) for k in (2, 3, 4))


class NoEmissions(Emissions):
    """No emissions model: no pollutant figures."""

    name = "none"
    summary = "no emissions model"

    def emissions(self, trace, summary):
        return EmissionsResult({}, {}, [[] for _ in range(self.B)])


FIGURES = ("no_ppm_wet", "no_ppm_dry", "no_g_per_kWh", "no_mass_mg", "burned_element_temperature_max_K")
"""Summary keys of :class:`ZeldovichNO` (NaN where a case has no burn)."""


class ZeldovichNO(Emissions):
    """Thermal NO (extended Zeldovich) in burned-mass elements of the last cycle.

    Notes
    -----
    From the finished cycle's trace: two zones at one pressure
    (:func:`cyclesim.combustion.burned_zones.decompose_two_zone`, replaceable through
    :meth:`zone_history`), the burned zone resolved into ``count`` burned-mass elements, each
    born at the constant-pressure adiabatic flame temperature of the unburned gas and then
    compressed and expanded with the pressure (:func:`~cyclesim.combustion.burned_zones.burned_elements`,
    whose notes state the heat-loss split), and each element's NO integrated from its birth to
    its freeze-out (:func:`cyclesim.combustion.zeldovich.integrate_growing_elements`, Heywood
    1988 eq. 11.8 on the tool's own equilibrium, tabulated per charge).

    Exhaust NO: the elements' mass-weighted NO, with the residual and EGR carrying NO at the
    same amount per kg (a settled cycle) and the unburned remainder (1 - combustion efficiency)
    none; wet ppm is per mole of exhaust (burned gas as complete-combustion products plus the
    unburned charge), dry ppm without its water.  ``no_mass_mg`` is the NO formed in one cycle of
    one cylinder, ``no_g_per_kWh`` that over the cylinder's brake work (NaN where BMEP <= 0 or
    in closed-cycle mode).  Only the thermal route is modelled (see
    :mod:`cyclesim.combustion.zeldovich` for what it leaves out).
    """

    name = "zeldovich_no"
    summary = "thermal NO (extended Zeldovich) in burned-mass elements, from the last cycle"
    params = (
        Param("count", "-", 20, "number of burned-mass elements", 1, 200, kind="int", sweepable=False),
        Param("freeze_temperature_K", "K", 1500.0,
              "an element's NO is held once it has cooled below this", 1000.0, 2500.0),
        Param("step_deg", "deg", 0.5, "crank step of the zone and element integration (the trace's"
              " points at least this far apart)", 0.05, 2.0, sweepable=False),
    )
    references = (
        "Heywood, J. B. (1988). Internal Combustion Engine Fundamentals. McGraw-Hill: sec. 11.2, "
        "eq. 11.8 and table 11.1 (rate constants after Hanson & Salimian 1984; from memory).",
        "Lavoie, G. A., Heywood, J. B., Keck, J. C. (1970). Experimental and theoretical study of "
        "nitric oxide formation in internal combustion engines. Combust. Sci. Technol. 1, 313-326 (from memory).",
        "Ferguson, C. R., Kirkpatrick, A. T. (2015). Internal Combustion Engines: Applied "
        "Thermosciences, 3rd ed. Wiley: two-zone model (wetted areas; from memory).",
    )

    def __init__(self, values: Mapping[str, Any], ctx) -> None:
        super().__init__(values, ctx)
        self.count = int(np.atleast_1d(self.p.count)[0])
        self.step_deg = float(np.atleast_1d(self.p.step_deg)[0])
        self.T_freeze = np.broadcast_to(np.asarray(self.p.freeze_temperature_K, float), (self.B,)).copy()
        w = ctx.walls
        self.T_wall = (np.asarray(w.head_temperature_K, float) + np.asarray(w.piston_temperature_K, float)
                       + np.asarray(w.liner_temperature_K, float)) / 3.0 * np.ones(self.B)

    # -- the replaceable step: zones from the trace -------------------------------------------
    def window(self, trace: Mapping[str, np.ndarray]) -> np.ndarray:
        """Indices of the trace's points the integration uses: IVC..EVO, at least ``step_deg``
        apart (from IVC, not from the burn: the unburned zone's burned-gas fraction is the charge's
        at IVC, and a case's window does not depend on when its batch-mates burn)."""
        th = np.asarray(trace["crank_deg"])[0]
        ivc = float(np.min(self.ctx.events.ivc))
        evo = float(np.max(self.ctx.events.evo))
        idx = np.nonzero((th >= ivc - 1e-9) & (th <= evo + 1e-9))[0]
        if idx.size < 3:
            idx = np.arange(th.size)
        dth = float(np.min(np.diff(th[idx]))) if idx.size > 1 else self.step_deg
        stride = max(1, int(round(self.step_deg / max(dth, 1e-9))))
        keep = idx[::stride]
        return keep if keep[-1] == idx[-1] else np.append(keep, idx[-1])

    def zone_history(self, trace: Mapping[str, np.ndarray], idx: np.ndarray) -> bz.ZoneHistory:
        """Unburned and burned zones over the points ``idx`` of the trace (a two-zone cylinder
        replaces this with its own zones)."""
        col = {k: np.asarray(trace[k], float)[:, idx] for k in
               ("volume_m3", "pressure_bar", "temperature_K", "mass_mg", "burned_gas_fraction",
                "cumulative_wall_heat_J")}
        if "zones.m_bz" in trace:   # a two-zone cylinder: its own zones
            z = {k: np.asarray(trace[k], float)[:, idx] for k in
                 ("zones.m_bz", "zones.s_u", "unburned_temperature_K", "burned_temperature_K")}
            return bz.zones_from_trace(
                self.ctx.gas, np.asarray(trace["crank_deg"], float)[0, idx], self.ctx.speed_rpm * np.ones(self.B),
                col["volume_m3"], col["pressure_bar"] * 1e5, col["mass_mg"] * 1e-6, z["zones.m_bz"],
                col["burned_gas_fraction"], z["unburned_temperature_K"], z["burned_temperature_K"], z["zones.s_u"])
        return bz.decompose_two_zone(
            self.ctx.gas, np.asarray(trace["crank_deg"], float)[0, idx], self.ctx.speed_rpm * np.ones(self.B),
            col["volume_m3"], col["pressure_bar"] * 1e5, col["temperature_K"], col["mass_mg"] * 1e-6,
            col["burned_gas_fraction"], col["cumulative_wall_heat_J"], self.T_wall)

    # -- the contract ----------------------------------------------------------------------
    def emissions(self, trace, summary):
        B = self.B
        nan = np.full(B, np.nan)
        figs = {k: nan.copy() for k in FIGURES}
        warn: list[list[str]] = [[] for _ in range(B)]
        th_all = np.asarray(trace["crank_deg"], float)[0]
        cols = {"unburned_zone_temperature_K": np.full((B, th_all.size), np.nan),
                "burned_zone_temperature_K": np.full((B, th_all.size), np.nan),
                "burned_gas_no_ppm": np.full((B, th_all.size), np.nan)}
        for k in range(self.count):
            cols[f"burned_element_{k + 1:02d}_temperature_K"] = np.full((B, th_all.size), np.nan)
        motored = np.asarray(summary.get("mode", np.full(B, "fired"))) == "motored"
        gas = self.ctx.gas
        if getattr(gas, "_compiled_consts", None) is None:     # not the real-gas tables
            for i in np.nonzero(~motored)[0]:
                warn[i].append(f"emissions zeldovich_no: the '{gas.burned_model}' gas has no equilibrium"
                               f" products, so NO is not computed (gas.properties: real for NO)")
            return EmissionsResult(figs, cols, warn)
        idx = self.window(trace)
        with np.errstate(all="ignore"):
            zones = self.zone_history(trace, idx)
        fired = (zones.x[:, -1] > 0.05) & ~motored
        if not fired.any():
            return EmissionsResult(figs, cols, warn)
        with np.errstate(all="ignore"):
            el = bz.burned_elements(gas, zones, self.count, self.T_wall)
        tabs = tables_for(gas)
        no, frozen_at = z.integrate_growing_elements(zones.t, zones.p, el.T, el.x, self.T_freeze, *tabs)
        x_tot = el.x.sum(axis=1)                                     # (B, n)
        n_mean = (el.x * no).sum(axis=1) / np.where(x_tot > 0, x_tot, 1.0)   # mol per kg burned gas
        prod = thermo.complete_products(gas.element_amounts)
        n_cp = sum(np.asarray(v, float) for v in prod.values())
        n_h2o = np.asarray(prod["H2O"], float)
        n_fresh = gas.R_unburned / thermo.R_U
        y_end = np.asarray(trace["burned_gas_fraction"], float)[:, idx[-1]]
        nbar = n_mean[:, -1]
        tot = y_end * n_cp + (1.0 - y_end) * n_fresh
        m_end = zones.m[:, -1] * zones.x[:, -1]
        m_no = nbar * m_end * M_NO
        W = np.asarray(summary.get("bmep_bar", nan), float) * 1e5 * self.ctx.geometry.Vd * np.ones(B)
        with np.errstate(divide="ignore", invalid="ignore"):
            figs["no_ppm_wet"] = np.where(fired, 1e6 * y_end * nbar / tot, np.nan)
            figs["no_ppm_dry"] = np.where(fired, 1e6 * y_end * nbar / (tot - y_end * n_h2o), np.nan)
            figs["no_mass_mg"] = np.where(fired, m_no * 1e6, np.nan)
            figs["no_g_per_kWh"] = np.where(fired & (W > 0), m_no * 1e3 * 3.6e6 / np.where(W > 0, W, 1.0), np.nan)
        T_el = el.T
        figs["burned_element_temperature_max_K"] = np.where(fired, np.nanmax(np.where(el.born, T_el, -np.inf),
                                                                              axis=(1, 2)), np.nan)
        if gas.burned_model != "equilibrium":
            for i in np.nonzero(fired)[0]:
                warn[i].append(f"emissions zeldovich_no: burned gas '{gas.burned_model}' (no dissociation) makes the"
                               f" burned-mass elements too hot for NO, whose rates use the equilibrium;"
                               f" use gas.burned_gas: equilibrium for NO")
        # range of the NO tables while the elements are integrated
        n = zones.p.shape[1]
        live = el.born & (np.arange(n)[None, None, :] < frozen_at[:, :, None])
        Tg, lpg = tabs[0], tabs[1]
        for i in np.nonzero(fired)[0]:
            Tl = T_el[i][live[i]]
            pl = np.broadcast_to(zones.p[i][None, :], live[i].shape)[live[i]]
            if Tl.size and (Tl.max() > Tg[-1] or pl.min() < np.exp(lpg[0]) or pl.max() > np.exp(lpg[-1])):
                warn[i].append(
                    f"emissions zeldovich_no: burned-mass elements reach {Tl.max():.0f} K and"
                    f" {pl.min() / 1e5:.1f}..{pl.max() / 1e5:.0f} bar, beyond its NO tables"
                    f" ({Tg[0]:.0f}..{Tg[-1]:.0f} K, {np.exp(lpg[0]) / 1e5:.0f}..{np.exp(lpg[-1]) / 1e5:.0f} bar):"
                    f" the rates there are held at the tables' edge (NO approximate)")
        # trace columns, on the trace's grid
        th = zones.theta
        inside = (th_all >= th[0]) & (th_all <= th[-1])

        contiguous = bool(np.all(np.diff(idx) == 1))

        def put(name, rows):
            out = cols[name]
            if contiguous:        # the window is the trace's own points: placed as they are
                out[:, idx] = rows
                return
            for i in range(B):
                r = rows[i]
                ok = np.isfinite(r)
                if ok.sum() >= 2:
                    v = np.interp(th_all, th[ok], r[ok], left=np.nan, right=np.nan)
                    out[i] = np.where(inside & (th_all >= th[ok][0]), v, np.nan)

        put("unburned_zone_temperature_K", zones.T_u)
        Tb_mean = np.nansum(np.where(el.born, el.x * T_el, 0.0), axis=1) / np.where(x_tot > 0, x_tot, np.nan)
        put("burned_zone_temperature_K", Tb_mean)
        put("burned_gas_no_ppm", np.where(x_tot > 0, 1e6 * n_mean / n_cp[:, None], np.nan))
        for k in range(self.count):
            put(f"burned_element_{k + 1:02d}_temperature_K", T_el[:, k])
        for name in cols:
            cols[name][~fired] = np.nan
        self.last_zones, self.last_elements, self.last_no = zones, el, no
        return EmissionsResult(figs, cols, warn)


SUBMODELS = [NoEmissions, ZeldovichNO]
