"""The closed cycle (IVC to EVO) on Cantera's reactor network: the reference of the speed ratio.

The same work as cyclesim's closed cycle on :data:`OVERRIDES` of ``demo_closed``: the same
slider-crank geometry (:class:`cyclesim.cylinder.geometry.Geometry`), the same single-Wiebe burn law and
Woschni wall heat (the project's own correlation functions, ``cyclesim_plugins.wiebe`` and
``cyclesim_plugins.heat_transfer``, with the batch's packed parameters), methane-air with
frozen composition: no chemical kinetics and no dissociation; the burn turns fresh charge into
its complete-combustion products at the Wiebe rate, with the species' NASA-7 properties from
GRI-Mech 3.0 (``gri30.yaml``) and Cantera's integrator (CVODES) in place of the cycle loop.

Cantera's reactor: an ``ExtensibleIdealGasReactor`` whose ``after_eval`` adds the burn's
species rates ``m dY_k/dt = m eta_c yu0 dx_b/dt (Y_prod,k - Y_fresh,k)`` and their energy
term ``-m sum_k u_k dY_k/dt`` to the ideal-gas reactor's equations (a heat-flux wall could release
the heat but could not change the composition, and with it R and c_v, as the burn does), a
``Wall`` to a reservoir whose velocity function moves the piston (area 1 m^2, velocity
``-dV/dt``), and a second ``Wall`` whose heat-rate function ``Q`` is Woschni's heat flow for the
reactor's current pressure and temperature.  The motored temperature Woschni's combustion term
needs is the isentrope of the fresh charge from IVC (the ``heat_transfer.T_mot`` state of the
cycle loop), tabulated once per case from Cantera's ``SV`` state and interpolated in ln V.
Trace output: ``ReactorNet.advance`` to every 0.1 deg point.
"""

from __future__ import annotations

import math
import time

import numpy as np

OVERRIDES = ["fuel.name=methane", "operating.lambda=1.0", "gas.burned_gas=complete", "blowby.model=none",
             "knock.model=none", "emissions.model=none", "simulation.output_step_deg=0.1"]
"""demo_closed with methane (GRI-Mech 3.0 has no gasoline surrogate), complete-combustion products
(frozen: no dissociation), no ring leakage (the reactor has no outflow), no NO (the reactor computes
none; the demo configs have the NO model on), at 0.1 deg output."""

RTOL, ATOL = 1e-9, 1e-15
"""CVODES tolerances of the agreement check (Cantera's own defaults): tight enough that the
comparison measures the cycle loop's error, not the reference's."""

TIMING_RTOL, TIMING_ATOL = 1e-6, 1e-12
"""Looser tolerances for the timing: Cantera's trace is then 1.5-2.1e-4 of the peak pressure
off the tight one (measured at 0, 20 and 40 deg advance), five to ten times the cycle loop's
own difference, so the speed ratio does not favour the cycle loop by asking more accuracy of
the reference (at 1e-7 Cantera is within 1e-5 and takes about 1.5 times as long)."""


def cases(advances_deg=range(0, 41)):
    """The 41-case batch: ``demo_closed`` on :data:`OVERRIDES` at spark advances 0..40 deg."""
    from cyclesim.config import load_config

    return [load_config("demo_closed", OVERRIDES + [f"burn.spark_advance_deg={a}"]) for a in advances_deg]


def _compositions(fuel, phi):
    """Mass fractions (by species name) of the fresh charge and of its complete products (lean or
    stoichiometric), from the fuel's CxHyOz and the package's air (cyclesim.gas.thermo)."""
    from cyclesim.gas import thermo

    n = thermo.fresh_charge(fuel, phi)
    if fuel.C + fuel.H / 4 - fuel.O / 2 > n["O2"] + 1e-12:
        raise ValueError("the reference burns lean or stoichiometric mixtures only")
    fresh = {"CH4" if k == "FUEL" else k: v for k, v in n.items()}
    prod = {"CO2": fuel.C, "H2O": fuel.H / 2, "N2": n["N2"], "AR": n["AR"],
            "O2": n["O2"] - (fuel.C + fuel.H / 4 - fuel.O / 2)}
    return fresh, prod


_SOLUTIONS: list = []


def _solutions():
    """Two GRI-Mech 3.0 phases (the reactor's and the reservoir's), loaded once."""
    if not _SOLUTIONS:
        import cantera as ct

        _SOLUTIONS.extend(ct.Solution("gri30.yaml") for _ in range(2))
    return _SOLUTIONS


LAST_CPU_S = [0.0]
"""Process CPU time [s] of the last :func:`run_case`'s integration (the part its returned wall time covers)."""


def run_case(case, output_step_deg=0.1, rtol=None, atol=None):
    """Cantera's closed cycle for one ``case``: (crank angles [deg], pressure [Pa], volume [m^3],
    seconds).

    The seconds are those of building the network and integrating it to every output angle,
    not of the set-up shared with the cycle loop (the batch, the compositions).
    """
    import cantera as ct

    from cyclesim.api import _registry_for
    from cyclesim.solve.batch import build_batch
    from cyclesim_plugins.heat_transfer import woschni_kernel
    from cyclesim_plugins.wiebe import wiebe_rate

    if case.fuel.name != "methane":
        raise ValueError("the Cantera reference is for methane (in GRI-Mech 3.0)")
    batch = build_batch([case], _registry_for([case]))
    geo = batch.geometry
    burn = batch.models["burn"]
    ht = batch.models["heat_transfer"].pack()
    prm = case.submodels["burn"].params
    theta0 = float(burn.start_deg()[0])
    dur, a, m_w = float(prm["duration_deg"]), float(prm["a"]), float(prm["m"])
    eta = float(burn.combustion_efficiency()[0])
    omega = 6.0 * float(case.operating.speed_rpm)            # deg/s
    ivc, evo = float(case.valves.ivc_deg), float(case.valves.evo_deg)
    p_ivc = float(case.operating.ivc_pressure_bar) * 1e5
    T_ivc = float(case.operating.ivc_temperature_K)
    xr = float(case.operating.residual_fraction)
    Tw = (float(case.walls.head_temperature_K), float(case.walls.piston_temperature_K),
          float(case.walls.liner_temperature_K))
    Sp = float(geo.mean_piston_speed(case.operating.speed_rpm)[0])
    V_ivc = float(geo.volume(ivc)[0])
    k_h = float(np.asarray(ht["k"]).ravel()[0])
    c1c, c1o = float(np.asarray(ht["c1_closed"]).ravel()[0]), float(np.asarray(ht["c1_open"]).ravel()[0])
    c2, Vd, t_exp = float(np.asarray(ht["c2"]).ravel()[0]), float(np.asarray(ht["Vd"]).ravel()[0]), ht["t_exp"]

    fresh_x, prod_x = _compositions(batch.fuel, 1.0 / float(case.operating.__dict__["lambda"]))
    gas, env_gas = _solutions()
    gas.TPX = 300.0, 1e5, fresh_x
    Y_f = gas.Y.copy()
    gas.TPX = 300.0, 1e5, prod_x
    Y_p = gas.Y.copy()
    dY = eta * (1.0 - xr) * (Y_p - Y_f)                     # per unit burn progress x_b
    # the motored temperature: the fresh charge's isentrope from IVC, in ln V
    gas.TPY = T_ivc, p_ivc, Y_f
    s0, v0 = gas.s, gas.v
    lnV = np.linspace(math.log(float(geo.Vc[0])), math.log(V_ivc), 240)
    T_mot_tab = np.empty_like(lnV)
    for i, lv in enumerate(lnV):
        gas.SV = s0, v0 * math.exp(lv) / V_ivc
        T_mot_tab[i] = gas.T

    t0, c0 = time.perf_counter(), time.process_time()
    gas.TPY = T_ivc, p_ivc, (1.0 - xr) * Y_f + xr * Y_p
    env = ct.Reservoir(env_gas, clone=False)

    def theta_at(t):
        return ivc + omega * t

    class Burning(ct.ExtensibleIdealGasReactor):
        def after_eval(self, t, LHS, RHS):
            th = theta_at(t)
            rate = float(wiebe_rate(th, theta0, dur, a, m_w)) * omega   # dx_b/dt [1/s]
            if rate == 0.0:
                return
            # the ideal-gas reactor's rows: LHS m for the mass fractions, m c_v for T
            mdY = self.mass * rate * dY
            rhs = np.asarray(RHS)
            rhs[3:] += mdY
            ph = self.phase
            rhs[2] -= float(np.dot(ph.partial_molar_int_energies / ph.molecular_weights, mdY))

    r = Burning(gas, energy="on", clone=False)
    r.chemistry_enabled = False
    r.volume = V_ivc

    # the piston's volume rate as a table Cantera evaluates itself (every 0.02 deg, linear):
    # cheaper than a Python call at each evaluation; V(t) then differs from the slider-crank
    # volume by at most 1e-6 of itself, near TDC (measured 9e-7; tests/test_cantera_cycle.py),
    # which moves the pressure by about 1e-6, against the 3e-5 the two traces differ by
    th_tab = np.linspace(ivc, evo, int(round((evo - ivc) / 0.02)) + 1)
    vdot = -geo.dV_dtheta(th_tab)[0] * omega                 # m^3/s through a 1 m^2 wall
    A_fixed = (float(geo.head_area_factor[0]) * float(geo.bore_area[0]),
               float(geo.piston_area_factor[0]) * float(geo.bore_area[0]))
    liner_per_V = math.pi * float(geo.bore_m[0]) / float(geo.bore_area[0])   # pi B (x + h_c) = pi B V / A

    def heat(t):
        th = theta_at(t)
        V = r.volume
        T = r.T
        p = r.phase.P
        T_mot = float(np.interp(math.log(V), lnV, T_mot_tab))
        h = float(woschni_kernel(p, T, V, Sp, True, th >= theta0, p_ivc, T_ivc, V_ivc, T_mot, k_h, c1c, c1o,
                                 c2, Vd, t_exp))
        return h * (A_fixed[0] * (T - Tw[0]) + A_fixed[1] * (T - Tw[1]) + liner_per_V * V * (T - Tw[2]))

    ct.Wall(env, r, A=1.0, velocity=ct.Tabulated1((th_tab - ivc) / omega, vdot))
    ct.Wall(r, env, A=1.0, Q=heat)
    net = ct.ReactorNet([r])
    net.rtol = RTOL if rtol is None else rtol
    net.atol = ATOL if atol is None else atol
    n = int(round((evo - ivc) / output_step_deg))
    th_out = ivc + output_step_deg * np.arange(n + 1)
    p_out = np.empty(n + 1)
    V_out = np.empty(n + 1)
    p_out[0], V_out[0] = r.phase.P, r.volume
    for i in range(1, n + 1):
        net.advance((th_out[i] - ivc) / omega)
        p_out[i], V_out[i] = r.phase.P, r.volume
    LAST_CPU_S[0] = time.process_time() - c0
    return th_out, p_out, V_out, time.perf_counter() - t0


def agreement(result, theta, p_ref):
    """The cycle loop's pressure trace against the reference's on the same angles: the largest
    difference over the reference's peak [-], the peak pressures' and their angles' differences
    [-, deg], and the gross work's relative difference [-]."""
    tr = result.trace
    th = np.asarray(tr["crank_deg"], float)
    p = np.asarray(tr["pressure_bar"], float) * 1e5
    V = np.asarray(tr["volume_m3"], float)
    if th.shape != theta.shape or np.max(np.abs(th - theta)) > 1e-9:
        p = np.interp(theta, th, p)
        V = np.interp(theta, th, V)
    k, kr = int(np.argmax(p)), int(np.argmax(p_ref))
    W = np.trapezoid(p, V)
    W_ref = np.trapezoid(p_ref, V)
    return {"max_abs_dp_over_pmax": float(np.max(np.abs(p - p_ref)) / p_ref[kr]),
            "p_max_rel": float(p[k] / p_ref[kr] - 1.0),
            "theta_pmax_deg": float(theta[k] - theta[kr]),
            "work_rel": float(W / W_ref - 1.0)}


def side_by_side(repeat=3):
    """Cantera's closed cycle and the cycle loop's on the same 41 cases, in one run.

    First the agreement: every case on Cantera at :data:`RTOL` against the cycle loop's trace
    (:func:`agreement`, the worst case of each measure); then the times: the cycle loop's
    41-case batch (median of ``repeat``), and every case on Cantera at :data:`TIMING_RTOL`.
    Returns plain data (per-case times in ms, the ratio of the median per-case times).
    """
    import statistics

    import cyclesim

    batch = cases()
    results = cyclesim.simulate(batch)
    worst: dict = {}
    for c, r in zip(batch, results):
        th, p, _, _ = run_case(c)
        for k, v in agreement(r, th, p).items():
            worst[k] = max(worst.get(k, 0.0), abs(v))
    ts, cs = [], []
    for _ in range(max(1, repeat)):
        t0, c0 = time.perf_counter(), time.process_time()
        cyclesim.simulate(batch)
        ts.append(time.perf_counter() - t0)
        cs.append(time.process_time() - c0)
    loop_ms = 1e3 * statistics.median(ts) / len(batch)
    loop_cpu_ms = 1e3 * statistics.median(cs) / len(batch)
    cantera_ms, cantera_cpu_ms = [], []
    for c in batch:
        cantera_ms.append(1e3 * run_case(c, rtol=TIMING_RTOL, atol=TIMING_ATOL)[3])
        cantera_cpu_ms.append(1e3 * LAST_CPU_S[0])
    med = statistics.median(cantera_ms)
    med_cpu = statistics.median(cantera_cpu_ms)
    return {
        "cases": f"demo_closed with {' '.join(OVERRIDES)}, spark advance 0..40 deg",
        "reference": "Cantera ExtensibleIdealGasReactor (burn's species and energy terms in after_eval),"
                     " piston Wall (tabulated velocity), heat Wall (Woschni in Python), no kinetics",
        "agreement_worst_of_41": worst,
        "agreement_rtol": RTOL,
        "timing_rtol": TIMING_RTOL,
        "cycle_loop_per_case_ms": loop_ms,
        "cantera_per_case_ms": [round(v, 2) for v in cantera_ms],
        "cantera_per_case_median_ms": med,
        "ratio": med / loop_ms,
        # the same in process CPU time, which a shared machine disturbs less than the wall clock
        "cycle_loop_per_case_cpu_ms": loop_cpu_ms,
        "cantera_per_case_cpu_median_ms": med_cpu,
        "ratio_cpu": med_cpu / loop_cpu_ms,
    }
