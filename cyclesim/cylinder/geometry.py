"""Cylinder geometry of a slider-crank mechanism, batched over cases.

Crank angle convention: degrees, 0 = the piston's top dead centre of the
firing stroke, increasing with crank rotation; the full four-stroke cycle
runs -360..360.  With a piston-pin offset the dead centres are no longer at
crank positions 0 and 180 deg from the cylinder axis; the angle is measured
from the actual top dead centre, so ``volume(0) == Vc`` always.
"""

from __future__ import annotations

import numpy as np

_DEG = np.pi / 180.0


def _arr(x, shape=None) -> np.ndarray:
    a = np.asarray(x, dtype=float)
    return a if shape is None else np.broadcast_to(a, shape).astype(float)


class Geometry:
    """Slider-crank cylinder geometry for a batch of ``B`` cases.

    Parameters
    ----------
    bore_m : array_like (B,)
        Cylinder bore [m].
    stroke_m : array_like (B,)
        Piston travel between top and bottom dead centre [m].  It defines the
        displacement ``Vd = bore_area * stroke_m`` (and so the compression
        ratio).  Without pin offset the crank radius is ``stroke_m / 2``; with
        an offset the travel slightly exceeds twice the crank radius, and the
        crank radius is solved so that the travel equals ``stroke_m``.
    conrod_m : array_like (B,)
        Connecting-rod length between bearing centres [m].
    compression_ratio : array_like (B,)
        Geometric compression ratio ``(Vd + Vc) / Vc`` [-].
    pin_offset_m : array_like (B,), optional
        Offset of the piston pin from the cylinder axis [m], positive towards
        the major-thrust side (the side the piston is pressed against during
        the expansion stroke; the usual anti-slap offset is positive).
        Default 0.
    head_area_factor : array_like (B,), optional
        Gas-side area of the cylinder head (roof, valve faces) divided by the
        bore area [-].  Default 1.1 (pent-roof chamber, common practice).
    piston_area_factor : array_like (B,), optional
        Gas-side area of the piston crown divided by the bore area [-].
        Default 1.0 (flat top).

    Attributes
    ----------
    B : int
        Number of cases.
    bore_m, stroke_m, conrod_m, compression_ratio, pin_offset_m : ndarray (B,)
        As given [m, -].
    crank_radius_m : ndarray (B,)
        Crank throw [m].
    bore_area : ndarray (B,)
        Cross-section of the bore, pi B^2 / 4 [m^2].
    Vd : ndarray (B,)
        Displacement of one cylinder [m^3].
    Vc : ndarray (B,)
        Clearance volume at top dead centre [m^3].
    clearance_height_m : ndarray (B,)
        Clearance volume divided by the bore area [m] (used for the liner area).
    tdc_crank_deg : ndarray (B,)
        Crank position at top dead centre measured from the cylinder axis
        [deg]; 0 without offset, negative with a positive offset.
    bdc_deg : ndarray (B,)
        Crank angle of bottom dead centre after firing TDC [deg]; 180 without
        offset.

    Notes
    -----
    Piston pin height above the crank centre for a crank position ``phi``
    (from the cylinder axis) and pin offset ``e``:

    ``y = a cos(phi) + sqrt(l^2 - (a sin(phi) + e)^2)``

    (Heywood 1988, eq. 2.5-2.6, extended by the offset).  Top dead centre is
    where crank and rod are in line, ``sin(phi_tdc) = -e / (l + a)``, with
    ``y_tdc = sqrt((l + a)^2 - e^2)``; bottom dead centre has
    ``y_bdc = sqrt((l - a)^2 - e^2)``.

    Wall areas: head and piston are constant (bore area times their factors);
    the exposed liner is ``pi B (x + h_c)`` with ``x`` the piston distance from
    top dead centre and ``h_c = Vc / bore_area`` the clearance height, i.e.
    the clearance volume is treated as a cylinder of the bore's diameter for
    the liner (common practice; Heywood 1988 eq. 2.8 omits ``h_c``).

    No input validation is done here (the config layer does it), except that
    the mechanism must be able to turn: ``conrod > crank radius + |offset|``.
    """

    def __init__(
        self,
        bore_m,
        stroke_m,
        conrod_m,
        compression_ratio,
        pin_offset_m=0.0,
        head_area_factor=1.1,
        piston_area_factor=1.0,
    ) -> None:
        shape = np.broadcast_shapes(
            np.shape(bore_m), np.shape(stroke_m), np.shape(conrod_m),
            np.shape(compression_ratio), np.shape(pin_offset_m),
            np.shape(head_area_factor), np.shape(piston_area_factor),
        )
        if len(shape) != 1:
            shape = (1,) if not shape else shape
        self.B = shape[0]
        self.bore_m = _arr(bore_m, shape)
        self.stroke_m = _arr(stroke_m, shape)
        self.conrod_m = _arr(conrod_m, shape)
        self.compression_ratio = _arr(compression_ratio, shape)
        self.pin_offset_m = _arr(pin_offset_m, shape)
        self.head_area_factor = _arr(head_area_factor, shape)
        self.piston_area_factor = _arr(piston_area_factor, shape)

        l, e, S = self.conrod_m, self.pin_offset_m, self.stroke_m
        a = np.where(l > 0.5 * S + np.abs(e), self._solve_crank_radius(S, l, e), 0.5 * S)
        ok = l > a + np.abs(e)
        if not np.all(ok):
            bad = np.flatnonzero(~ok)
            raise ValueError(
                "connecting rod must be longer than crank radius + |pin offset|"
                f" (cases {bad.tolist()})"
            )
        self.crank_radius_m = a
        self.bore_area = np.pi / 4.0 * self.bore_m**2
        self.Vd = self.bore_area * S
        self.Vc = self.Vd / (self.compression_ratio - 1.0)
        self.clearance_height_m = self.Vc / self.bore_area
        self._y_tdc = np.sqrt((l + a) ** 2 - e**2)
        self._phi_tdc = -np.arcsin(e / (l + a))
        self.tdc_crank_deg = self._phi_tdc / _DEG
        phi_bdc = np.pi - np.arcsin(e / (l - a))
        self.bdc_deg = (phi_bdc - self._phi_tdc) / _DEG

    @staticmethod
    def _solve_crank_radius(S, l, e) -> np.ndarray:
        """Crank radius [m] whose piston travel equals ``S`` (Newton, exact for e = 0)."""
        a = 0.5 * S
        if not np.any(e):
            return a
        for _ in range(30):
            rp = np.sqrt(np.maximum((l + a) ** 2 - e**2, 1e-300))
            rm = np.sqrt(np.maximum((l - a) ** 2 - e**2, 1e-300))
            f = rp - rm - S
            df = (l + a) / rp + (l - a) / rm
            step = f / df
            a = a - step
            if np.all(np.abs(step) < 1e-15 * S):
                break
        return a

    def distinct(self) -> tuple["Geometry", np.ndarray]:
        """The geometry of the distinct cases and, per case, its row in it.

        ``(g, rows)``: ``g.volume(theta)[rows]`` equals ``self.volume(theta)``, and so on,
        for a fraction of the work where the cases share their geometry (a sweep of
        operating conditions).
        """
        got = self.__dict__.get("_distinct")
        if got is not None:         # a geometry is fixed once made: its distinct rows are too
            return got
        self._distinct = got = self._find_distinct()
        return got

    def _find_distinct(self) -> tuple["Geometry", np.ndarray]:
        from .distinct import distinct_rows

        cols = (self.bore_m, self.stroke_m, self.conrod_m, self.compression_ratio, self.pin_offset_m,
                self.head_area_factor, self.piston_area_factor)
        first, rows = distinct_rows(cols)
        if first.size == self.B:
            return self, np.arange(self.B)
        return Geometry(*(c[first] for c in cols)), rows

    # -- helpers -----------------------------------------------------------
    def _cast(self, theta_deg, *arrays):
        """Crank position [rad] from the axis plus per-case arrays shaped to broadcast."""
        th = np.asarray(theta_deg, dtype=float)
        extra = (1,) * th.ndim
        out = [x.reshape(x.shape + extra) for x in arrays]
        phi = th * _DEG + self._phi_tdc.reshape(self._phi_tdc.shape + extra)
        return phi, out

    def _pin_height(self, theta_deg):
        phi, (a, l, e) = self._cast(theta_deg, self.crank_radius_m, self.conrod_m, self.pin_offset_m)
        arm = a * np.sin(phi) + e
        root = np.sqrt(l**2 - arm**2)
        return phi, a, arm, root, a * np.cos(phi) + root

    # -- public ------------------------------------------------------------
    def piston_position(self, theta_deg) -> np.ndarray:
        """Distance of the piston below its top-dead-centre position [m].

        Parameters
        ----------
        theta_deg : float or array_like (n,)
            Crank angle [deg], 0 = top dead centre.

        Returns
        -------
        ndarray
            Shape (B,) for a scalar angle, (B, n) for an array of angles [m].
        """
        _, _, _, _, y = self._pin_height(theta_deg)
        th = np.asarray(theta_deg)
        return self._y_tdc.reshape(self.B, *(1,) * th.ndim) - y

    def volume(self, theta_deg) -> np.ndarray:
        """Cylinder volume [m^3], shape (B,) or (B, n) as :meth:`piston_position`."""
        th = np.asarray(theta_deg)
        ex = (1,) * th.ndim
        x = self.piston_position(theta_deg)
        return self.Vc.reshape(self.B, *ex) + self.bore_area.reshape(self.B, *ex) * x

    def volume_at(self, theta_per_case) -> np.ndarray:
        """Cylinder volume [m^3] (B,) at one crank angle per case ``theta_per_case`` (B,) [deg]."""
        th = np.asarray(theta_per_case, dtype=float) * np.ones(self.B)
        phi = th * _DEG + self._phi_tdc
        a, l, e = self.crank_radius_m, self.conrod_m, self.pin_offset_m
        arm = a * np.sin(phi) + e
        y = a * np.cos(phi) + np.sqrt(l**2 - arm**2)
        return self.Vc + self.bore_area * (self._y_tdc - y)

    def dV_dtheta(self, theta_deg) -> np.ndarray:
        """Volume change per crank degree [m^3/deg], shape as :meth:`volume`."""
        phi, a, arm, root, _ = self._pin_height(theta_deg)
        dy_dphi = -a * np.sin(phi) - arm * a * np.cos(phi) / root
        th = np.asarray(theta_deg)
        return -self.bore_area.reshape(self.B, *(1,) * th.ndim) * dy_dphi * _DEG

    def areas(self, theta_deg) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Gas-side wall areas (head, piston, liner) [m^2], each shaped as :meth:`volume`."""
        th = np.asarray(theta_deg)
        ex = (1,) * th.ndim
        x = self.piston_position(theta_deg)
        head = np.broadcast_to((self.head_area_factor * self.bore_area).reshape(self.B, *ex), x.shape)
        piston = np.broadcast_to((self.piston_area_factor * self.bore_area).reshape(self.B, *ex), x.shape)
        liner = np.pi * self.bore_m.reshape(self.B, *ex) * (x + self.clearance_height_m.reshape(self.B, *ex))
        return head.copy(), piston.copy(), liner

    def mean_piston_speed(self, speed_rpm) -> np.ndarray:
        """Mean piston speed 2 S N / 60 [m/s] for engine speed ``speed_rpm`` [rpm] (B,)."""
        return 2.0 * self.stroke_m * np.asarray(speed_rpm, dtype=float) / 60.0
