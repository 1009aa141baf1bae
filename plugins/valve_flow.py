"""Gas exchange through poppet valves: lift, effective flow area and mass flow.

Lift
    From the valve events (opening and closing crank angles, defined at a
    stated threshold lift) with a smooth ramp-and-dwell shape, or from a user
    lift table.  Both are periodic over the 720 deg four-stroke cycle, so any
    crank angle (the solver runs from IVC to IVC + 720) is valid.

Effective area
    ``C_D(L/D) x min(pi D L, port_area_ratio x pi D^2 / 4) x count``: the
    curtain area at low lift, the port (seat) area at high lift.

Mass flow
    Isentropic compressible orifice flow in either direction (choked or
    subsonic, backflow included) through :func:`cyclesim.cylinder.flow.orifice_mass_flow`,
    with its smooth linear law at vanishing pressure difference.

The effective areas are tabulated once per batch on a fine uniform periodic
crank grid; :meth:`PoppetValves.mass_flows` (the hot-loop method) interpolates
them with index arithmetic and skips closed valves.
"""

from __future__ import annotations

import math
import pathlib
from typing import Any, Mapping, Sequence

import numpy as np

from cyclesim.errors import ConfigError, InputFileError
from cyclesim.tables import read_table
from cyclesim.cylinder.flow import orifice_mass_flow
from cyclesim.params import Param
from cyclesim.roles import GasState, SetupContext, ValveFlow

CYCLE_DEG = 720.0
"""Length of the four-stroke cycle [deg]."""

DEFAULT_CD_TABLE = (
    (0.00, 0.70),
    (0.05, 0.68),
    (0.10, 0.65),
    (0.15, 0.61),
    (0.20, 0.57),
    (0.25, 0.53),
    (0.30, 0.50),
    (0.40, 0.45),
)
"""Default discharge coefficient vs lift/diameter, rows (L/D [-], C_D [-]).

About 0.65-0.7 at low L/D, falling at high lift: the trend of Heywood (1988),
ch. 6 (values from memory, not read off the figure).  Held constant beyond
the ends of the table.
"""

_VALVES = ("intake", "exhaust")


def _arr(value: Any, B: int) -> np.ndarray:
    """Broadcast a value to a float array of shape (B,)."""
    return np.broadcast_to(np.asarray(value, dtype=float), (B,)).copy()


# -- lift shapes --------------------------------------------------------------

def ramp_fraction_at(lift_ratio: np.ndarray) -> np.ndarray:
    """Position on the raised-cosine ramp where lift/max lift equals ``lift_ratio``.

    Parameters
    ----------
    lift_ratio : ndarray
        Lift over maximum lift, 0..1 [-].

    Returns
    -------
    ndarray
        ``t`` with ``(1 - cos(pi t)) / 2 = lift_ratio`` [-], 0..1.
    """
    return np.arccos(1.0 - 2.0 * np.asarray(lift_ratio, dtype=float)) / math.pi


def event_lift(theta_deg: np.ndarray, opening_deg: np.ndarray, closing_deg: np.ndarray,
               max_lift: np.ndarray, threshold_lift: np.ndarray,
               dwell_fraction: float | np.ndarray) -> np.ndarray:
    """Ramp-and-dwell valve lift through given events at a threshold lift.

    Parameters
    ----------
    theta_deg : ndarray
        Crank angle [deg], broadcasting against the per-case arrays (e.g. (1, n)).
    opening_deg, closing_deg : ndarray
        Valve events [deg], where the lift equals ``threshold_lift``
        (e.g. (B, 1)).  The open duration is ``(closing - opening) mod 720``.
    max_lift : ndarray
        Maximum lift [m].
    threshold_lift : ndarray
        Lift at which the events are defined [m], 0 <= threshold < max lift.
    dwell_fraction : float or ndarray
        Share of the total lift duration spent at maximum lift [-], 0..0.9.

    Returns
    -------
    ndarray
        Lift [m], >= 0, periodic over 720 deg.

    Notes
    -----
    Over its total duration ``D_t`` from zero lift to zero lift the profile
    rises on a raised cosine ``L = L_max (1 - cos(pi t)) / 2`` (zero velocity
    at both ends of the ramp) over ``r D_t`` with ``r = (1 - dwell) / 2``,
    dwells at ``L_max`` and falls symmetrically.  The threshold lift is
    reached at ramp position ``t_s = arccos(1 - 2 L_s/L_max) / pi``, so the
    profile that passes exactly through the given events has
    ``D_t = D_event / (1 - 2 r t_s)`` and starts ``r D_t t_s`` before the
    opening event.
    """
    r = 0.5 * (1.0 - np.asarray(dwell_fraction, dtype=float))
    t_s = ramp_fraction_at(threshold_lift / max_lift)
    d_event = np.mod(closing_deg - opening_deg, CYCLE_DEG)
    d_total = d_event / (1.0 - 2.0 * r * t_s)
    ramp = r * d_total
    start = opening_deg - ramp * t_s
    phi = np.mod(theta_deg - start, CYCLE_DEG)
    inside = phi < d_total
    t = np.clip(np.minimum(phi, d_total - phi) / ramp, 0.0, 1.0)
    return np.where(inside, max_lift * 0.5 * (1.0 - np.cos(math.pi * t)), 0.0)


def event_total_duration(opening_deg, closing_deg, max_lift, threshold_lift, dwell_fraction):
    """Duration from zero lift to zero lift of :func:`event_lift` [deg]."""
    r = 0.5 * (1.0 - np.asarray(dwell_fraction, dtype=float))
    t_s = ramp_fraction_at(np.asarray(threshold_lift) / np.asarray(max_lift))
    return np.mod(np.asarray(closing_deg) - opening_deg, CYCLE_DEG) / (1.0 - 2.0 * r * t_s)


def table_lift(theta_deg: np.ndarray, crank_deg: np.ndarray, lift_m: np.ndarray) -> np.ndarray:
    """Lift from a table, periodic over 720 deg, zero outside the table.

    Parameters
    ----------
    theta_deg : ndarray
        Crank angle [deg], any shape.
    crank_deg : ndarray (k,)
        Increasing table crank angles [deg], spanning less than 720 deg.
    lift_m : ndarray (k,)
        Lift at those angles [m].

    Returns
    -------
    ndarray
        Linearly interpolated lift [m], shape of ``theta_deg``.
    """
    th = np.asarray(theta_deg, dtype=float)
    wrapped = crank_deg[0] + np.mod(th - crank_deg[0], CYCLE_DEG)
    return np.interp(wrapped, crank_deg, lift_m, left=0.0, right=0.0)


# -- table input ----------------------------------------------------------------

def read_two_column_csv(path: pathlib.Path, columns: Sequence[str]) -> tuple[np.ndarray, list[int]]:
    """Read two numeric columns from a CSV file (checked by :func:`cyclesim.tables.read_table`).

    Parameters
    ----------
    path : pathlib.Path
        The file.  Blank lines and lines starting with ``#`` are skipped.  An
        optional header row names the columns; with a header, ``columns`` are
        picked by name, without one the first two columns are used.
    columns : sequence of str
        The two expected column names (for the header and the messages).

    Returns
    -------
    data : ndarray (k, 2)
        The numbers, in file order; the first column strictly increasing.
    lines : list of int
        File line number of each data row (for messages).

    Raises
    ------
    InputFileError
        Missing file, missing column, a non-numeric or non-finite entry, or a
        first column that does not increase; the message names the file and
        the line.
    """
    tab = read_table(path, f"{columns[0]}, {columns[1]} table", tuple(columns), header_optional=True,
                     lowercase=True, increasing=(columns[0],))
    return np.column_stack([tab.columns[c] for c in columns]), tab.lines.tolist()


def load_lift_table(spec: str, base_dir: Any, key: str) -> tuple[np.ndarray, np.ndarray]:
    """Read and check a lift table CSV (columns crank_deg, lift_mm).

    Parameters
    ----------
    spec : str
        File path, relative to ``base_dir`` unless absolute.
    base_dir : path-like or None
        Folder of the config file.
    key : str
        Config key, for messages.

    Returns
    -------
    crank_deg : ndarray (k,)
        Crank angles [deg], strictly increasing, span < 720 deg.
    lift_m : ndarray (k,)
        Lift [m], >= 0.
    """
    path = pathlib.Path(spec).expanduser()
    if not path.is_absolute() and base_dir is not None:
        path = pathlib.Path(base_dir) / path
    data, lines = read_two_column_csv(path, ("crank_deg", "lift_mm"))
    neg = np.flatnonzero(data[:, 1] < 0.0)
    if neg.size:
        k = int(neg[0])
        raise InputFileError(f"{path}: line {lines[k]}: lift_mm = {data[k, 1]:g} is negative")
    if data.shape[0] < 2:
        raise InputFileError(f"{path}: a lift table needs at least two rows ({key})")
    if data[-1, 0] - data[0, 0] >= CYCLE_DEG:
        raise InputFileError(
            f"{path}: crank_deg spans {data[-1, 0] - data[0, 0]:g} deg; a lift table must"
            f" span less than one cycle ({CYCLE_DEG:g} deg)"
        )
    if not np.any(data[:, 1] > 0.0):
        raise InputFileError(f"{path}: all lifts are zero ({key})")
    return data[:, 0].copy(), data[:, 1] * 1e-3


def load_cd_table(value: Any, base_dir: Any) -> tuple[np.ndarray, np.ndarray]:
    """Check a discharge-coefficient table (rows [L/D, C_D]) or read it from CSV.

    Parameters
    ----------
    value : sequence of [float, float], str or None
        Inline rows, a CSV path (columns l_over_d, cd) or None for
        :data:`DEFAULT_CD_TABLE`.
    base_dir : path-like or None
        Folder of the config file, for a relative path.

    Returns
    -------
    l_over_d, cd : ndarray (k,)
        Lift/diameter (strictly increasing, >= 0) and discharge coefficient
        (0 < C_D <= 1) [-].
    """
    if value is None:
        data = np.array(DEFAULT_CD_TABLE, dtype=float)
        return data[:, 0], data[:, 1]
    if isinstance(value, (str, pathlib.Path)):
        path = pathlib.Path(value).expanduser()
        if not path.is_absolute() and base_dir is not None:
            path = pathlib.Path(base_dir) / path
        data, _ = read_two_column_csv(path, ("l_over_d", "cd"))
        where = str(path)
        err = InputFileError
    else:
        where = "valve_flow.cd_table"
        err = ConfigError
        try:
            data = np.array([[float(r[0]), float(r[1])] for r in value], dtype=float)
            if any(len(r) != 2 for r in value):
                raise ValueError
        except (TypeError, ValueError, IndexError):
            raise ConfigError(
                f"{where}: expected a list of [l_over_d, cd] number pairs, got {value!r}"
            ) from None
        if data.shape[0] == 0 or not np.all(np.isfinite(data)):
            raise ConfigError(f"{where}: expected finite [l_over_d, cd] rows, got {value!r}")
        bad = np.flatnonzero(np.diff(data[:, 0]) <= 0.0)
        if bad.size:
            k = int(bad[0]) + 1
            raise ConfigError(
                f"{where}: row {k + 1}: l_over_d = {data[k, 0]:g} does not increase"
                f" (previous {data[k - 1, 0]:g})"
            )
    if np.any(data[:, 0] < 0.0):
        raise err(f"{where}: l_over_d must be >= 0")
    if np.any((data[:, 1] <= 0.0) | (data[:, 1] > 1.0)):
        raise err(f"{where}: cd must lie in (0, 1]")
    return data[:, 0].copy(), data[:, 1].copy()


# -- submodels --------------------------------------------------------------------

class PoppetValves(ValveFlow):
    """Intake and exhaust poppet valves with compressible flow in both directions.

    Parameters
    ----------
    values : mapping
        ``lift_dwell_fraction`` [-], ``port_area_ratio`` [-], ``cd_table``
        (rows [L/D, C_D] or CSV path, None = default curve),
        ``intake_lift_table`` / ``exhaust_lift_table`` (CSV paths or None),
        ``area_grid_step_deg`` [deg].
    ctx : SetupContext
        Uses ``events`` (``ivo, ivc, evo, evc`` [deg], ``threshold_lift_m``
        [m]), ``valves`` (``intake_diameter_mm``, ``exhaust_diameter_mm``,
        ``intake_max_lift_mm``, ``exhaust_max_lift_mm``, ``intake_count``,
        ``exhaust_count``) and ``base_dir``.

    Notes
    -----
    The discharge coefficient multiplies the smaller of curtain and port
    area.  Measured coefficients are often referenced to the curtain area at
    every lift; to use such data unchanged set ``port_area_ratio`` high
    enough (above 4 x the largest L/D) that the port never limits.
    A lift table replaces the profile from the events, but the solver still
    uses the events (e.g. for the closed part of the cycle); a mismatch is
    reported by :meth:`warnings`.
    """

    name = "poppet"
    summary = "poppet valves: event or table lift, curtain/port area, C_D(L/D), compressible flow"
    compiled_form = "poppet"        # the loop reads areas_at() on its grid
    params = (
        Param("lift_dwell_fraction", "-", 0.15,
              "share of each valve's lift duration held at maximum lift (0 = raised cosine)",
              min=0.0, max=0.9),
        Param("port_area_ratio", "-", 1.0,
              "port (seat) flow area over valve head area pi D^2/4; limits the area at high lift",
              min=0.0, max=10.0, min_exclusive=True),
        Param("cd_table", "-", None,
              "discharge coefficient vs lift/diameter, rows [l_over_d, cd] (default curve if unset)",
              kind="table", sweepable=False),
        Param("intake_lift_table", "-", None,
              "CSV of intake lift (columns crank_deg, lift_mm) replacing the event profile",
              kind="path", sweepable=False),
        Param("exhaust_lift_table", "-", None,
              "CSV of exhaust lift (columns crank_deg, lift_mm) replacing the event profile",
              kind="path", sweepable=False),
        Param("intake_area_factor", "-", 1.0,
              "factor on the intake effective area (a runner restriction, or cylinder-to-cylinder"
              " trapped-mass spread)", min=0.0, max=5.0, min_exclusive=True),
        Param("area_grid_step_deg", "deg", 0.25,
              "crank step of the tabulated effective-area curve used in the flow calculation",
              min=0.01, max=2.0, sweepable=False),
    )
    references = (
        "Heywood, J. B. (1988). Internal Combustion Engine Fundamentals, McGraw-Hill, "
        "ch. 6 (valve flow area and discharge coefficients) and App. C (compressible "
        "flow through a restriction).",
    )

    def __init__(self, values: Mapping[str, Any], ctx: SetupContext) -> None:
        super().__init__(values, ctx)
        B = self.B
        p = self.p
        v = ctx.valves
        ev = ctx.events
        self.dwell_arr = _arr(p.lift_dwell_fraction, B)
        self.port_ratio = _arr(p.port_area_ratio, B)
        self.cd_x, self.cd_y = load_cd_table(p.cd_table, ctx.base_dir)
        threshold = _arr(getattr(ev, "threshold_lift_m", 0.0), B)
        self.threshold = threshold

        self.diameter: dict[str, np.ndarray] = {}
        self.count: dict[str, np.ndarray] = {}
        self.max_lift: dict[str, np.ndarray] = {}
        self.events: dict[str, tuple[np.ndarray, np.ndarray]] = {
            "intake": (_arr(ev.ivo, B), _arr(ev.ivc, B)),
            "exhaust": (_arr(ev.evo, B), _arr(ev.evc, B)),
        }
        self.table: dict[str, tuple[np.ndarray, np.ndarray] | None] = {}
        for valve in _VALVES:
            d = _arr(getattr(v, f"{valve}_diameter_mm"), B) * 1e-3
            n = _arr(getattr(v, f"{valve}_count"), B)
            if np.any(d <= 0.0):
                raise ConfigError(f"valves.{valve}_diameter_mm: must be > 0, got {d * 1e3}")
            if np.any(n < 0.0) or np.any(n != np.round(n)):
                raise ConfigError(f"valves.{valve}_count: must be a whole number >= 0, got {n}")
            self.diameter[valve] = d
            self.count[valve] = n
            spec = getattr(p, f"{valve}_lift_table")
            if spec is not None:
                crank, lift = load_lift_table(spec, ctx.base_dir, f"valve_flow.{valve}_lift_table")
                self.table[valve] = (crank, lift)
                self.max_lift[valve] = np.full(B, lift.max())
                continue
            self.table[valve] = None
            lmax = _arr(getattr(v, f"{valve}_max_lift_mm"), B) * 1e-3
            if np.any(lmax <= threshold):
                raise ConfigError(
                    f"valves.{valve}_max_lift_mm: must exceed the event threshold lift"
                    f" ({threshold.max() * 1e3:g} mm), got {lmax * 1e3}"
                )
            opening, closing = self.events[valve]
            dur = np.mod(closing - opening, CYCLE_DEG)
            total = event_total_duration(opening, closing, lmax, threshold, self.dwell_arr)
            if np.any(dur <= 0.0) or np.any(total >= CYCLE_DEG):
                raise ConfigError(
                    f"events: {valve} valve open duration {dur} deg (lift profile {total} deg)"
                    " must be positive and shorter than the 720 deg cycle"
                )
            self.max_lift[valve] = lmax

        # Effective-area curves on a uniform periodic grid, node k at k*step.
        steps = np.unique(np.asarray(p.area_grid_step_deg, dtype=float))
        if steps.size != 1:
            raise ConfigError("valve_flow.area_grid_step_deg: must be equal for all cases of a batch")
        n_grid = int(round(CYCLE_DEG / float(steps[0])))
        self._n = n_grid
        self._step = CYCLE_DEG / n_grid
        self._inv_step = 1.0 / self._step
        self._tab_int = None          # the area tables are built on first use (a closed cycle never needs them)

    def _build_tables(self) -> None:
        """Effective-area tables on the uniform periodic grid, with their steps and open masks."""
        grid = np.arange(self._n + 1) * self._step
        area = self.flow_area(grid)
        # rows = crank nodes, so one interpolation reads two contiguous rows
        self._tab = {k: np.ascontiguousarray(area[k].T) for k in _VALVES}
        self._dtab = {k: np.ascontiguousarray(np.diff(self._tab[k], axis=0)) for k in _VALVES}
        self._open = {k: np.any(self._tab[k] > 0.0, axis=1) for k in _VALVES}
        self._tab_int, self._dtab_int, self._open_int = (
            self._tab["intake"], self._dtab["intake"], self._open["intake"])
        self._tab_exh, self._dtab_exh, self._open_exh = (
            self._tab["exhaust"], self._dtab["exhaust"], self._open["exhaust"])

    # -- geometry on grids -------------------------------------------------------
    def _distinct(self) -> tuple[np.ndarray, np.ndarray]:
        """Rows of the cases with distinct valve settings, and each case's row among them."""
        got = getattr(self, "_distinct_rows", None)
        if got is None:
            from cyclesim.cylinder.distinct import distinct_rows

            cols = [self.threshold, self.dwell_arr, self.port_ratio, _arr(self.p.intake_area_factor, self.B)]
            for valve in _VALVES:
                cols += [*self.events[valve], self.max_lift[valve], self.diameter[valve], self.count[valve]]
            got = self._distinct_rows = distinct_rows(cols)
        return got

    def lift(self, theta_deg: np.ndarray, _rows=None) -> dict[str, np.ndarray]:
        """Valve lift [m] on a crank grid [deg] (n,) -> ``{"intake": (B,n), "exhaust": (B,n)}``."""
        th = np.asarray(theta_deg, dtype=float)
        th = th[None, :] if th.ndim == 1 else th
        r = slice(None) if _rows is None else _rows
        nb = self.B if _rows is None else len(_rows)
        out = {}
        for valve in _VALVES:
            tab = self.table[valve]
            if tab is not None:
                out[valve] = np.broadcast_to(table_lift(th, *tab), (nb, th.shape[-1])).copy()
            else:
                opening, closing = self.events[valve]
                out[valve] = event_lift(th, opening[r, None], closing[r, None],
                                        self.max_lift[valve][r, None], self.threshold[r, None],
                                        self.dwell_arr[r, None])
        return out

    def geometric_area(self, lift_m: np.ndarray, valve: str, _rows=None) -> np.ndarray:
        """Geometric flow area [m^2] of all valves of one port at a lift [m] (B, n).

        ``min(pi D L, port_area_ratio pi D^2/4) x count``.
        """
        r = slice(None) if _rows is None else _rows
        d = self.diameter[valve][r, None]
        curtain = math.pi * d * lift_m
        port = self.port_ratio[r, None] * 0.25 * math.pi * d * d
        return np.minimum(curtain, port) * self.count[valve][r, None]

    def discharge_coefficient(self, l_over_d: np.ndarray) -> np.ndarray:
        """Discharge coefficient [-] at lift/diameter [-] (table, held at its ends)."""
        return np.interp(l_over_d, self.cd_x, self.cd_y)

    def flow_area(self, theta_deg: np.ndarray) -> dict[str, np.ndarray]:
        """Effective flow area C_D x A [m^2] on a crank grid [deg], as :meth:`lift`.

        Evaluated once per distinct valve setting of the batch (one row in a sweep of
        operating conditions) and copied to the cases that share it.
        """
        rows, inv = self._distinct()
        # a grid per case (B, n) is evaluated case by case
        single = rows.size == self.B or np.ndim(theta_deg) > 1
        sel = None if single else rows
        lifts = self.lift(theta_deg, sel)
        r = slice(None) if single else rows
        out = {}
        for valve in _VALVES:
            L = lifts[valve]
            cd = self.discharge_coefficient(L / self.diameter[valve][r, None])
            out[valve] = cd * self.geometric_area(L, valve, sel)
        out["intake"] = out["intake"] * _arr(self.p.intake_area_factor, self.B)[r, None]
        if not single:
            out = {k: v[inv] for k, v in out.items()}
        return out

    # -- hot loop ----------------------------------------------------------------
    def _areas(self, theta: Any) -> tuple[np.ndarray | None, np.ndarray | None]:
        """Interpolated effective areas [m^2] (B,) at a crank angle, None if shut."""
        if self._tab_int is None:
            self._build_tables()
        if np.ndim(theta) == 0:
            x = (float(theta) % CYCLE_DEG) * self._inv_step
            i = int(x)
            if i >= self._n:
                i = self._n - 1
            f = x - i
            a_int = (self._tab_int[i] + f * self._dtab_int[i]
                     if self._open_int[i] or self._open_int[i + 1] else None)
            a_exh = (self._tab_exh[i] + f * self._dtab_exh[i]
                     if self._open_exh[i] or self._open_exh[i + 1] else None)
            return a_int, a_exh
        # per-case crank angles (B,)
        x = np.mod(np.asarray(theta, dtype=float), CYCLE_DEG) * self._inv_step
        i = np.minimum(x.astype(np.intp), self._n - 1)
        f = x - i
        cols = np.arange(self.B)
        a_int = self._tab_int[i, cols] + f * self._dtab_int[i, cols]
        a_exh = self._tab_exh[i, cols] + f * self._dtab_exh[i, cols]
        return a_int, a_exh

    def areas_at(self, theta_deg: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Effective areas [m^2] (n, B) of the intake and exhaust at crank angles (n,), as
        :meth:`_areas` gives them one angle at a time (zero where the valves are shut)."""
        if self._tab_int is None:
            self._build_tables()
        x = np.mod(np.asarray(theta_deg, dtype=float), CYCLE_DEG) * self._inv_step
        i = np.minimum(x.astype(np.intp), self._n - 1)
        f = (x - i)[:, None]
        return tuple(np.where((opn[i] | opn[i + 1])[:, None], tab[i] + f * dtab[i], 0.0)
                     for tab, dtab, opn in ((self._tab_int, self._dtab_int, self._open_int),
                                            (self._tab_exh, self._dtab_exh, self._open_exh)))

    def mass_flows(self, s: GasState) -> tuple[np.ndarray, np.ndarray]:
        """(intake, exhaust) mass flows [kg/s] (B,), positive into the cylinder.

        Each valve's flow is the orifice flow from its plenum (side 1) to the
        cylinder (side 2), so backflow out of the cylinder comes out negative.
        """
        a_int, a_exh = self._areas(s.theta)
        if a_int is None:
            m_int = np.zeros(self.B)
        else:
            m_int = orifice_mass_flow(a_int, s.p_int, s.T_int, s.R_int, s.gamma_int,
                                      s.p, s.T, s.R, s.gamma)
        if a_exh is None:
            m_exh = np.zeros(self.B)
        else:
            m_exh = orifice_mass_flow(a_exh, s.p_exh, s.T_exh, s.R_exh, s.gamma_exh,
                                      s.p, s.T, s.R, s.gamma)
        return m_int, m_exh

    # -- reporting ---------------------------------------------------------------
    def table_event_angles(self, valve: str) -> tuple[np.ndarray, np.ndarray] | None:
        """Opening and closing angles [deg] where a lift table crosses the threshold lift.

        None for an event-defined valve.  NaN where the table never reaches
        the threshold.
        """
        tab = self.table[valve]
        if tab is None:
            return None
        crank, lift = tab
        opening = np.full(self.B, np.nan)
        closing = np.full(self.B, np.nan)
        for thr in np.unique(self.threshold):
            above = np.flatnonzero(lift >= thr)
            if above.size == 0:
                continue
            i, j = above[0], above[-1]
            o = crank[i] if i == 0 else np.interp(thr, lift[i - 1:i + 1], crank[i - 1:i + 1])
            c = (crank[j] if j == lift.size - 1
                 else np.interp(thr, lift[j:j + 2][::-1], crank[j:j + 2][::-1]))
            sel = self.threshold == thr
            opening[sel], closing[sel] = o, c
        return opening, closing

    def warnings(self, trace: Mapping[str, np.ndarray]) -> list[list[str]]:
        """Per-case warnings: lift table and configured events disagree by more than 2 deg."""
        out: list[list[str]] = [[] for _ in range(self.B)]
        names = {"intake": ("ivo", "ivc"), "exhaust": ("evo", "evc")}
        for valve in _VALVES:
            got = self.table_event_angles(valve)
            if got is None:
                continue
            for k, (angle, want) in enumerate(zip(got, self.events[valve])):
                diff = np.abs((angle - want + 360.0) % CYCLE_DEG - 360.0)
                for b in np.flatnonzero(~(diff <= 2.0)):
                    out[b].append(
                        f"valve_flow: the {valve} lift table crosses the threshold lift at"
                        f" {angle[b]:g} deg but events.{names[valve][k]} = {want[b]:g} deg"
                    )
        return out


class ShutValves(ValveFlow):
    """Valves held shut (closed-cycle runs): no flow, zero lift.

    Parameters
    ----------
    values : mapping
        No parameters.
    ctx : SetupContext
        Batch set-up context.
    """

    name = "none"
    summary = "valves shut: no gas exchange (closed cycle)"
    exchanges_gas = False
    compiled_form = "none"
    params = ()
    references = ()

    def mass_flows(self, s: GasState) -> tuple[np.ndarray, np.ndarray]:
        """(intake, exhaust) mass flows [kg/s]: zeros (B,)."""
        return np.zeros(self.B), np.zeros(self.B)

    def lift(self, theta_deg: np.ndarray) -> dict[str, np.ndarray]:
        """Valve lift [m]: zeros (B, n)."""
        n = np.asarray(theta_deg).shape[-1]
        return {k: np.zeros((self.B, n)) for k in _VALVES}

    def flow_area(self, theta_deg: np.ndarray) -> dict[str, np.ndarray]:
        """Effective flow area [m^2]: zeros (B, n)."""
        return self.lift(theta_deg)


SUBMODELS = [PoppetValves, ShutValves]
