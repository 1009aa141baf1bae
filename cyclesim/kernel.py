"""Choice of the cycle loop: compiled (numba, optional) or Python.

The compiled loop (:mod:`cyclesim._compiled`) integrates one cycle of every case of
a batch in machine code.  It covers the built-in submodels below; any other
submodel (a third-party plug-in, or a built-in not listed) runs on the Python path,
which is always there and is the reference.  Results agree to rounding
(``tests/test_kernel.py``).

================  ==========================================================
role              built-ins with a compiled form
================  ==========================================================
burn              ``wiebe``, ``wiebe_ca50``, ``wiebe_table``, ``double_wiebe``, ``wiebe_flame``,
                  ``none``
heat_transfer     ``woschni``, ``hohenberg``, ``annand``, ``none``
blowby            ``orifice``, ``none``
valve_flow        ``poppet``, ``none``
boundary          ``constant``, ``manifold_trace`` (closed cycles: any)
knock             ``livengood_wu``, ``none``
================  ==========================================================

Choice: the environment variable ``CYCLESIM_KERNEL`` = ``auto`` (default: compiled
where numba is installed and the batch's submodels allow), ``python`` (always the
Python path) or ``compiled`` (as auto, but a missing numba, or a batch with a submodel that
has no compiled form, is an error).  Install numba with the ``fast`` extra:
``pip install -e ".[fast]"``.  The first use compiles the loop (some seconds) and caches it
on disk; later processes load it.

A case whose state or derivatives stop being finite or physical in the compiled
loop is re-run on the Python path for that cycle, which stops it with the message
naming the cause.
"""

from __future__ import annotations

import os
import threading

import numpy as np

from .errors import ConfigError

ENV = "CYCLESIM_KERNEL"
CHOICES = ("auto", "python", "compiled")

THREADS_ENV = "CYCLESIM_THREADS"
MIN_CASES_PER_THREAD = 8
"""A batch is split over threads only where each gets at least this many cases."""
_threads: int | None = None   # threads per compiled cycle; None: CYCLESIM_THREADS or the CPUs (at most 2)

_mod = None          # the compiled module, False where numba is missing
_used = {"compiled": 0, "python": 0}
"""Cycles run by each path in this process (for tests and the benchmark)."""
_told: set = set()   # notices already printed in this process (compiling, each fall-back reason)
FALLBACK_SLOWDOWN = "15-60 times slower"
"""How much slower the numpy loop is than the compiled one (benchmarks/run.py, numpy_loop)."""


def threads() -> int:
    """Threads that share the cases of one compiled cycle.

    ``CYCLESIM_THREADS`` if set, else the CPUs this process may use, at most 2; worker
    processes of a parallel sweep use 1 (:func:`set_threads`), as they already fill the CPUs.
    """
    if _threads is not None:
        return _threads
    v = os.environ.get(THREADS_ENV, "").strip()
    if v:
        try:
            n = int(v)
        except ValueError:
            raise ConfigError(f"{THREADS_ENV}={v!r}: expected a whole number >= 1") from None
        if n < 1:
            raise ConfigError(f"{THREADS_ENV}={v!r}: expected a whole number >= 1")
        return n
    from .parallel import available_cpus

    return min(2, available_cpus())


def set_threads(n: int | None) -> None:
    """Threads per compiled cycle in this process (None: back to the default of :func:`threads`)."""
    global _threads
    _threads = None if n is None else max(1, int(n))


def choice() -> str:
    v = os.environ.get(ENV, "auto").strip().lower() or "auto"
    if v not in CHOICES:
        raise ConfigError(f"{ENV}={v!r}: expected one of {', '.join(CHOICES)}")
    return v


def compiled_module():
    """The compiled module, or None where numba is not installed (or the Python path is chosen)."""
    global _mod
    c = choice()
    if c == "python":
        return None
    if _mod is None:
        try:
            from . import _compiled
            _mod = _compiled
        except ImportError as exc:
            if c == "compiled":
                raise ConfigError(f"{ENV}=compiled needs numba: pip install -e \".[fast]\" ({exc})") from exc
            _mod = False
        except Exception as exc:  # noqa: BLE001 - a broken numba install: say so, use the numpy loop
            if c == "compiled":
                raise ConfigError(f"{ENV}=compiled: numba failed to load ({type(exc).__name__}: {exc})") from exc
            _notice("numba", f"numba failed to load ({type(exc).__name__}: {exc}); using the numpy loop")
            _mod = False
    if _mod is False and c == "compiled":
        raise ConfigError(f"{ENV}=compiled needs numba: pip install -e \".[fast]\"")
    return _mod or None


def _notice(key: str, text: str) -> None:
    """One line on stderr, once per process and ``key``."""
    if key not in _told:
        _told.add(key)
        import sys

        print(f"cyclesim: {text}", file=sys.stderr, flush=True)


def _compile_notice(mod) -> None:
    """One line on stderr where the compiled loop is not cached yet (the first run compiles it)."""
    if "compiling" in _told:
        return
    try:
        cached = bool(mod.run_cycle._cache._cache_file._load_index())
    except Exception:  # noqa: BLE001 - numba internals: no notice rather than a failure
        return
    if not cached:
        _notice("compiling", "compiling the cycle loop for this machine (once after installing; about 10-20 s)")
    _told.add("compiling")


def _b(x, B) -> np.ndarray:
    return np.array(np.broadcast_to(np.asarray(x, dtype=float), (B,)), dtype=float)  # a writable copy


def _cw(a, dtype=float) -> np.ndarray:
    return np.require(a, dtype=dtype, requirements=["C", "W"])


def why_not(batch, rhs) -> str | None:
    """None if the batch's submodels all have a compiled form, else the reason they do not."""
    from cyclesim_plugins import (boundaries, burn_table, flame_burn, heat_transfer, knock, ring_leakage,
                                  valve_flow, wiebe)

    from .thermo import GasTables

    m = batch.models
    allowed = {
        "burn": (wiebe.Wiebe, wiebe.WiebeCA50, burn_table.WiebeTable, wiebe.DoubleWiebe, wiebe.NoBurn,
                 flame_burn.WiebeFlame),
        "heat_transfer": (heat_transfer.Woschni, heat_transfer.Hohenberg, heat_transfer.Annand,
                          heat_transfer.NoHeatTransfer),
        "blowby": (ring_leakage.Orifice, ring_leakage.NoLeakage),
        "valve_flow": (valve_flow.PoppetValves, valve_flow.ShutValves),
        "knock": (knock.LivengoodWu, knock.NoKnock),
    }
    if rhs.mode == "full":
        allowed["boundary"] = (boundaries.ConstantPlenums, boundaries.ManifoldTraces)
    for role, classes in allowed.items():
        if type(m[role]) not in classes:
            return f"{role} model {m[role].name!r} has no compiled form"
    if type(batch.gas) is not GasTables:
        return "gas properties are not the built-in tables"
    for role, model, sv in rhs.sub_specs:
        if (role, sv.name) not in (("heat_transfer", heat_transfer.Woschni.STATE),
                                   ("knock", knock.LivengoodWu.STATE)):
            return f"state {role}.{sv.name} has no compiled form"
    return None


class Compiled:
    """The packed inputs of one batch's compiled cycle (built once per integration)."""

    def __init__(self, mod, batch, rhs, half, Gu, geo_rows, closed_pts, burning_pts, open_at):
        from cyclesim_plugins import (boundaries, burn_table, flame_burn, heat_transfer, knock, ring_leakage,
                                      valve_flow, wiebe)

        self.mod = mod
        self.rhs = rhs
        B = batch.B
        self.full = rhs.mode == "full"
        m = batch.models
        self.th = _cw(half)
        # one compiled signature for all: C-contiguous, writable arrays
        self.Gc = [_cw(a) for a in Gu]          # (points, distinct geometries)
        self.geo_rows = _cw(geo_rows, np.int64)
        self.closed = _cw(closed_pts, np.bool_)
        self.burning = _cw(burning_pts, np.bool_)
        self.open_at = _cw(open_at, np.bool_)
        # effective valve areas at every point (zero where the valves are shut)
        vf = m["valve_flow"]
        if self.full and type(vf) is valve_flow.PoppetValves and self.open_at.any():
            self.Ai, self.Ae = (_cw(a) for a in vf.areas_at(half))
        else:
            self.Ai = self.Ae = np.zeros((half.size, B))
        plen = np.zeros((11, B))
        self.PI = self.PE = np.zeros((1, B))
        if self.full:
            # the plenum gas as the numpy loop sees it: properties fixed at its first call, at the
            # cycle's first point; a pressure trace (manifold_trace) read at every point
            pl = rhs.plenums(float(half[0]), {})
            plen[:] = np.stack([_b(a, B) for a in pl["int"] + pl["exh"][:2] + pl["exh"][3:]])
            self.PI = _cw(plen[0:1])
            self.PE = _cw(plen[6:7])
            if type(m["boundary"]) is boundaries.ManifoldTraces:
                self.PI, self.PE = (_cw(a) for a in m["boundary"].pressures_at(half))
        P = np.zeros((mod.N_P, B))
        codes = np.zeros(4, dtype=np.int64)
        c = mod

        def put(pairs):
            """Parameter rows (named offsets of cyclesim._compiled) from per-case values."""
            for row, v in pairs:
                P[row] = _b(v, B)

        bm = m["burn"]
        if type(bm) in (wiebe.Wiebe, wiebe.WiebeCA50, burn_table.WiebeTable):     # one rate law
            codes[0] = c.BURN_WIEBE
            put(((c.W_THETA0, bm.theta0), (c.W_INV_DUR, bm._inv_dur), (c.W_C, bm._c), (c.W_A, bm.a),
                 (c.W_M, bm.m)))
        elif type(bm) is wiebe.DoubleWiebe:
            codes[0] = c.BURN_DOUBLE
            put(((c.D_THETA0, bm.theta0), (c.D_D1, bm.d1), (c.D_A, bm.a), (c.D_M1, bm.m1), (c.D_F1, bm.f1),
                 (c.D_START2, bm.start2), (c.D_D2, bm.d2), (c.D_M2, bm.m2)))
        elif type(bm) is flame_burn.WiebeFlame:
            codes[0] = c.BURN_FLAME
            phi_m, b_m, b_phi = flame_burn.MK_FUELS[bm.fuel]
            put(((c.F_SPARK, bm.spark), (c.F_DELAY, bm.delay_ref), (c.F_DUR, bm.dur_ref), (c.F_A, bm.a),
                 (c.F_M, bm.m), (c.F_EFF, bm.eff), (c.F_KD, bm.kd), (c.F_SD, bm.sd), (c.F_KB, bm.kb),
                 (c.F_SB, bm.sb), (c.F_VISC, 1.0 if bm.visc else 0.0), (c.F_PHI, bm.phi),
                 (c.F_V_SPARK, bm.V_spark), (c.F_SPEED_RATIO, bm.speed_ratio), (c.F_G_REF, bm.G_ref),
                 (c.F_PHI_M, phi_m), (c.F_B_M, b_m), (c.F_B_PHI, b_phi),
                 (c.F_DILUTION, flame_burn.MK_DILUTION), (c.F_T0, flame_burn.T0_K),
                 (c.F_ATM, flame_burn.ATM_PA), (c.F_VISC_EXP, 1.0 + flame_burn.VISCOSITY_T_EXPONENT),
                 (c.F_V_TDC, bm.V_tdc), (c.F_G_REF_DUR, bm.G_ref_dur)))
        ht = m["heat_transfer"]
        if type(ht) is heat_transfer.Woschni:
            codes[1] = c.HT_WOSCHNI
            put(((c.H_K, ht._k), (c.H_C1_CLOSED, ht._c1_closed), (c.H_C1_OPEN, ht._c1_open),
                 (c.H_C2, ht.p.c2_m_per_sK), (c.H_VD, ht._Vd)))
        elif type(ht) is heat_transfer.Hohenberg:
            codes[1] = c.HT_HOHENBERG
            put(((c.H_MULT, ht.p.multiplier),))
        elif type(ht) is heat_transfer.Annand:
            codes[1] = c.HT_ANNAND
            put(((c.H_MULT, ht.p.multiplier), (c.H_ANNAND_A, ht.p.a), (c.H_ANNAND_B, ht.p.b),
                 (c.H_RAD, ht.p.radiation_factor), (c.H_PRANDTL, ht.p.prandtl_number), (c.H_BORE, ht._bore)))
        bb = m["blowby"]
        if type(bb) is ring_leakage.Orifice:
            codes[2] = c.BB_ORIFICE
            put(((c.B_CDA, bb._cda), (c.B_P_CC, bb._p_cc)))
        kn = m["knock"]
        if type(kn) is knock.LivengoodWu:
            codes[3] = c.KN_LW
            put(((c.K_PRE, kn._pre_ms), (c.K_ACT, kn.act), (c.K_X_MAX, kn.x_max), (c.K_ATM, knock.ATM_PA),
                 (c.K_P_EXP, knock.DE_PRESSURE_EXPONENT)))
        from .solver import CORE

        isub = np.full(2, -1, dtype=np.int64)
        self.reset = np.zeros((2, rhs.n))
        for k, (role, model, sv) in enumerate(rhs.sub_specs):
            row = len(CORE) + k
            isub[0 if role == "heat_transfer" else 1] = row
            if sv.reset_at_ivc:
                if isinstance(sv.initial, str):
                    self.reset[0, row] = 1.0          # the cylinder temperature ("T_ivc")
                else:
                    self.reset[0, row] = 2.0
                    self.reset[1, row] = float(sv.initial)
        self.gas_tab, self.gas_off, self.gc, nRm1, self.uc4 = batch.gas._compiled_consts()
        ivc = _b(batch.valves.ivc_deg, B)
        self.steps = _cw(np.diff(half[::2]))
        self.status = np.zeros(B, dtype=np.int64)
        CB = np.zeros((mod.N_ROWS, B))
        CB[mod.R_OMEGA] = _b(rhs.omega, B)
        CB[mod.R_SP] = _b(rhs.Sp, B)
        CB[mod.R_TW:mod.R_TW + 3] = np.stack([_b(t, B) for t in rhs.Tw])
        CB[mod.R_ETA] = _b(rhs.eta_c, B)
        CB[mod.R_DH] = _b(rhs._dh298, B)
        CB[mod.R_BUF] = _b(rhs._buf_scale, B)
        CB[mod.R_PLEN:mod.R_PLEN + 11] = plen
        CB[mod.R_P:mod.R_P + P.shape[0]] = P
        CB[mod.R_IVC_DEG] = ivc
        CB[mod.R_V_AT_IVC] = _b(batch.geometry.volume_at(ivc), B) if self.full else 0.0
        self.CB = CB
        self.IC = np.array([codes[0], codes[1], codes[2], codes[3], isub[0], isub[1], nRm1], dtype=np.int64)

    def cycle(self, y: np.ndarray, Y: np.ndarray, F: np.ndarray) -> bool:
        """One cycle from ``y`` into ``Y``, ``F``; False (nothing kept) if any case needs the Python path."""
        rhs = self.rhs
        mod = self.mod
        CB = self.CB
        r = mod.R_IVC
        CB[r], CB[r + 1], CB[r + 2] = rhs.p_ivc, rhs.T_ivc, rhs.V_ivc
        G = self.Gc
        args = (self.full, self.th, self.steps, G[0], G[1], G[2], G[3], G[4], self.closed, self.burning,
                self.open_at, self.Ai, self.Ae, _cw(y), Y, F, CB, self.IC, self.reset, self.geo_rows,
                self.PI, self.PE, self.gas_tab, self.gas_off, self.gc, self.uc4, self.status)
        B = self.status.size
        n_thr = min(threads(), B // MIN_CASES_PER_THREAD)
        if n_thr <= 1:
            mod.run_cycle(*args, 0, B)
        else:
            # disjoint case ranges on threads of their own (started and joined here, so no thread
            # outlives the call: worker processes may still be forked from this one)
            cuts = [B * k // n_thr for k in range(n_thr + 1)]
            errors: list = []

            def part(k):
                try:
                    mod.run_cycle(*args, cuts[k], cuts[k + 1])
                except BaseException as exc:  # noqa: BLE001 - re-raised in the caller
                    errors.append(exc)

            helpers = [threading.Thread(target=part, args=(k,), daemon=True) for k in range(1, n_thr)]
            for t in helpers:
                t.start()
            part(0)
            for t in helpers:
                t.join()
            if errors:
                raise errors[0]
        if self.status.any():
            return False
        rhs.p_ivc, rhs.T_ivc, rhs.V_ivc = CB[r].copy(), CB[r + 1].copy(), CB[r + 2].copy()
        _used["compiled"] += 1
        return True


def loop_for(batch, rhs) -> tuple[object, str]:
    """The compiled module for this batch (or None) and the name of the loop it runs on.

    The name is ``"compiled"``, or ``"numpy"`` with the reason in parentheses where numba is
    installed but a submodel has no compiled form; that fall-back is also said once per
    process and reason on stderr, since it costs time.
    """
    mod = compiled_module()
    if mod is None:
        why = f"{ENV}=python" if choice() == "python" else "numba not installed: pip install -e \".[fast]\""
        return None, f"numpy ({why})"
    reason = why_not(batch, rhs)
    if reason is not None:
        if choice() == "compiled":
            raise ConfigError(f"{ENV}=compiled: {reason}")
        if any(type(m).__module__.split(".")[0] != "cyclesim_plugins" for m in batch.models.values()):
            # a plug-in of the user's: worth a word (a study's own built-in variants are not)
            _notice(reason, f"{reason}: this batch runs on the numpy loop ({FALLBACK_SLOWDOWN} than the"
                            " compiled loop of the built-in submodels)")
        return None, f"numpy ({reason})"
    _compile_notice(mod)
    return mod, "compiled"


def prepare(batch, rhs, half, Gu, geo_rows, closed_pts, burning_pts, open_at) -> tuple[Compiled | None, str]:
    """The compiled cycle of this batch (None for the Python path) and the loop's name (:func:`loop_for`)."""
    mod, loop = loop_for(batch, rhs)
    if mod is None:
        return None, loop
    return Compiled(mod, batch, rhs, half, Gu, geo_rows, closed_pts, burning_pts, open_at), loop
