"""A spherical flame centred at the spark plug in the combustion chamber.

The flame front is a sphere of radius r about the spark-plug gap; the burned
region is the part of the chamber inside it.  For a chamber shape and a
piston position this module gives, against r:

- ``burned_volume_m3``: volume of chamber and ball together,
- ``front_area_m2``: area of the sphere inside the chamber (= d V_b / d r),
- ``head_wetted_m2``, ``piston_wetted_m2``, ``liner_wetted_m2``: the walls
  inside the ball (behind the flame), for the split of wall heat between the
  zones.

The ball is intersected with the chamber as a region of space (a part of a
bowl hidden from the plug by the piston crown counts as burned once inside
the sphere), the usual quasi-dimensional idealisation (Heywood 1988,
section 14.4, from memory).

Chamber (config section ``engine.chamber``, lengths in mm)
---------------------------------------------------------
Coordinates: z = 0 is the deck (head gasket) plane, z > 0 the head, the
piston crown at z = -h (h the clearance height: the distance from the deck
down to the flat part of the crown).

- ``head: flat`` (z <= 0) or ``pent_roof``: two faces inclined at
  ``roof_angle_deg`` to the deck, meeting at a ridge along y through the
  bore axis: z <= tan(a) (R - |x|); the bore wall continues up to the roof
  (the triangular end walls count as head).
- ``piston: flat`` or ``bowl``: a cylindrical bowl on the bore axis,
  ``bowl_diameter_mm`` by ``bowl_depth_mm``.
- ``plug_x_mm`` (across the ridge), ``plug_y_mm`` (along it): the plug gap's
  offset from the bore axis; ``plug_depth_mm``: how far the gap sits below
  the head surface at that point.

Method
------
Front area: latitude circles of the sphere about the vertical through the
plug, each with the arc inside the chamber's horizontal section exact
(:func:`front_area`); the burned volume is its integral over the radius
(:func:`burned_volume`).  An independent second method, used as a check:
rays from the plug (Gauss-Legendre in the cosine of
the polar angle, uniform in azimuth).  The chamber is the union of convex
pieces (the main chamber; the bowl), so along each ray it is one interval
[t0, t1] per piece, from the ray's crossings of planes and cylinders.  Then
V_b(r) = sum_rays w (min(r, t1)^3 - t0^3)/3 over rays with t0 < r, and
A_f(r) = r^2 sum_rays w [t0 < r < t1], evaluated for all r at once from
sorted cumulative sums.  Wetted areas: planar faces by strips across x
(midpoints in x = -R cos(phi)) with the chord inside disc and ball exact
in y; cylindrical walls by azimuth (midpoints) with the height inside the
ball exact in z.

All the functions below work on floats and numpy arrays in SI units; the
chamber enters as the plain array of :func:`ChamberShape.parameters`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields
from typing import Any, Mapping, NamedTuple

import numpy as np

from ..errors import ConfigError
from ..params import suggestion

SECTION = "engine.chamber"

# indices of the packed chamber parameters (ChamberShape.parameters)
P_R, P_TAN, P_RB, P_DB, P_XP, P_YP, P_ZP = range(7)


@dataclass(frozen=True)
class ChamberShape:
    """Combustion-chamber shape and spark-plug position (config section ``engine.chamber``).

    Attributes
    ----------
    head : str
        ``"flat"`` or ``"pent_roof"``.
    roof_angle_deg : float
        Inclination of each pent-roof face to the deck plane [deg], 0 < a < 45
        (ignored for a flat head).
    piston : str
        ``"flat"`` or ``"bowl"``.
    bowl_diameter_mm, bowl_depth_mm : float
        The cylindrical bowl on the bore axis [mm] (ignored for a flat piston).
    plug_x_mm, plug_y_mm : float
        Offset of the plug gap from the bore axis, across and along the roof ridge [mm].
    plug_depth_mm : float
        Depth of the plug gap below the head surface at the plug [mm], >= 0.
    """

    head: str = "flat"
    roof_angle_deg: float = 20.0
    piston: str = "flat"
    bowl_diameter_mm: float = 0.0
    bowl_depth_mm: float = 0.0
    plug_x_mm: float = 0.0
    plug_y_mm: float = 0.0
    plug_depth_mm: float = 3.0

    def __post_init__(self):
        k = SECTION
        if self.head not in ("flat", "pent_roof"):
            raise ConfigError(f"{k}.head: expected flat or pent_roof, got {self.head!r}")
        if self.piston not in ("flat", "bowl"):
            raise ConfigError(f"{k}.piston: expected flat or bowl, got {self.piston!r}")
        for f in fields(self):
            v = getattr(self, f.name)
            if f.name in ("head", "piston"):
                continue
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
                raise ConfigError(f"{k}.{f.name}: expected a number, got {v!r}")
        if self.head == "pent_roof" and not 0.0 < self.roof_angle_deg < 45.0:
            raise ConfigError(f"{k}.roof_angle_deg: must be in (0, 45) deg, got {self.roof_angle_deg!r}")
        if self.piston == "bowl" and (self.bowl_diameter_mm <= 0 or self.bowl_depth_mm <= 0):
            raise ConfigError(f"{k}: a bowl piston needs bowl_diameter_mm > 0 and bowl_depth_mm > 0")
        if self.plug_depth_mm < 0:
            raise ConfigError(f"{k}.plug_depth_mm: must be >= 0, got {self.plug_depth_mm!r}")

    @classmethod
    def from_mapping(cls, d: Mapping[str, Any] | None) -> "ChamberShape":
        """Build from a config mapping; unknown keys raise ConfigError with a suggestion."""
        d = dict(d or {})
        names = [f.name for f in fields(cls)]
        for key in d:
            if key not in names:
                raise ConfigError(f"{SECTION}.{key}: unknown key" + suggestion(str(key), names)
                                  + f"; allowed: {', '.join(names)}")
        return cls(**d)

    def parameters(self, bore_m: float) -> np.ndarray:
        """Packed SI parameters: R, tan(roof angle), bowl radius, bowl depth, plug x, y, z [m, -]."""
        R = 0.5 * bore_m
        if math.hypot(self.plug_x_mm, self.plug_y_mm) * 1e-3 >= R:
            raise ConfigError(f"{SECTION}: the plug offset must lie inside the bore "
                              f"({bore_m * 1e3:.1f} mm)")
        tan_a = math.tan(math.radians(self.roof_angle_deg)) if self.head == "pent_roof" else 0.0
        rb = 0.5e-3 * self.bowl_diameter_mm if self.piston == "bowl" else 0.0
        db = 1e-3 * self.bowl_depth_mm if self.piston == "bowl" else 0.0
        if rb >= R:
            raise ConfigError(f"{SECTION}.bowl_diameter_mm: must be smaller than the bore "
                              f"({bore_m * 1e3:.1f} mm), got {self.bowl_diameter_mm!r}")
        xp, yp = 1e-3 * self.plug_x_mm, 1e-3 * self.plug_y_mm
        zp = tan_a * (R - abs(xp)) - 1e-3 * self.plug_depth_mm
        return np.array([R, tan_a, rb, db, xp, yp, zp])

    def clearance_height_m(self, bore_m: float, volume_m3) -> np.ndarray:
        """Clearance height h [m] at chamber volume ``volume_m3`` [m^3] (roof and bowl subtracted).

        Raises ConfigError where roof and bowl alone exceed the volume or the
        piston would reach the plug gap.
        """
        q = self.parameters(bore_m)
        R = q[P_R]
        h = (np.asarray(volume_m3, dtype=float) - roof_volume(q) - bowl_volume(q)) / (math.pi * R * R)
        h_min = float(np.min(h))
        if h_min <= 0:
            raise ConfigError(f"{SECTION}: roof and bowl ({(roof_volume(q) + bowl_volume(q)) * 1e6:.2f}"
                              f" cm^3) do not fit in the clearance volume")
        if -q[P_ZP] >= h_min:
            raise ConfigError(f"{SECTION}.plug_depth_mm: the plug gap would be below the piston "
                              f"crown at TDC (clearance height {h_min * 1e3:.2f} mm)")
        return h


def roof_volume(q) -> float:
    """Volume of the pent roof above the deck [m^3]: 2 R^3 tan(a) (pi/2 - 2/3) (by integration)."""
    return 2.0 * q[P_R] ** 3 * q[P_TAN] * (0.5 * math.pi - 2.0 / 3.0)


def bowl_volume(q) -> float:
    """Volume of the piston bowl [m^3]."""
    return math.pi * q[P_RB] ** 2 * q[P_DB]


def chamber_volume(q, h):
    """Chamber volume [m^3] at clearance height ``h`` [m]."""
    return math.pi * q[P_R] ** 2 * h + roof_volume(q) + bowl_volume(q)


def chamber_areas(q, h):
    """Total head, piston and liner areas [m^2] at clearance height ``h`` [m] (exact)."""
    R, t, rb, db = q[P_R], q[P_TAN], q[P_RB], q[P_DB]
    # pent faces: the half-discs' projection / cos(a); end walls: R^2 tan(a) (2 pi - 4)
    head = math.pi * R * R * math.sqrt(1.0 + t * t) + R * R * t * (2.0 * math.pi - 4.0)
    piston = math.pi * R * R + 2.0 * math.pi * rb * db
    liner = 2.0 * math.pi * R * np.asarray(h, dtype=float)
    return head, piston, liner


def max_radius(q, h_max: float) -> float:
    """A flame radius [m] beyond which the whole chamber at clearance ``h_max`` [m] is burned."""
    R, t, rb, db, xp, yp, zp = (q[i] for i in range(7))
    rho_p = math.hypot(xp, yp)
    cands = [math.hypot(R + rho_p, -h_max - zp), math.hypot(R + rho_p, t * R - zp),
             math.hypot(rb + rho_p, -h_max - db - zp), math.hypot(R + rho_p, -zp)]
    return 1.001 * max(cands)


# ----------------------------------------------------------------------------
# rays: volume and front area
# ----------------------------------------------------------------------------
def ray_directions(n_polar: int, n_azimuth: int):
    """Unit directions (M, 3) and solid-angle weights (M,) [sr] summing to 4 pi."""
    mu, wmu = np.polynomial.legendre.leggauss(n_polar)
    phi = (np.arange(n_azimuth) + 0.5) * (2.0 * math.pi / n_azimuth)
    s = np.sqrt(1.0 - mu * mu)
    d = np.stack([np.outer(s, np.cos(phi)), np.outer(s, np.sin(phi)),
                  np.outer(mu, np.ones(n_azimuth))], axis=-1).reshape(-1, 3)
    w = np.outer(wmu, np.full(n_azimuth, 2.0 * math.pi / n_azimuth)).ravel()
    return d, w


def ray_interval(px, py, pz, dx, dy, dz, radius, nx, nz, c):
    """Interval [t0, t1] of rays P + t d (t >= 0) inside a convex piece.

    The piece: x^2 + y^2 <= radius^2 and nx[k] x + nz[k] z <= c[k] for every k
    (planes normal to the x-z plane).  Returns t0, t1 [m] (t1 <= t0: missed).
    """
    a = dx * dx + dy * dy
    b = px * dx + py * dy
    c0 = px * px + py * py - radius * radius
    disc = np.maximum(b * b - a * c0, 0.0)
    sq = np.sqrt(disc)
    safe = np.maximum(a, 1e-300)
    vertical = a < 1e-14
    inside_axis = c0 <= 0.0
    t0 = np.where(vertical, np.where(inside_axis, 0.0, np.inf), (-b - sq) / safe)
    t1 = np.where(vertical, np.where(inside_axis, np.inf, -np.inf), (-b + sq) / safe)
    t1 = np.where(~vertical & (b * b - a * c0 < 0.0), -np.inf, t1)
    t0 = np.maximum(t0, 0.0)
    for k in range(len(c)):
        den = nx[k] * dx + nz[k] * dz
        num = c[k] - (nx[k] * px + nz[k] * pz)
        with np.errstate(divide="ignore", invalid="ignore"):
            tk = num / den
        t1 = np.where(den > 0.0, np.minimum(t1, tk), t1)
        t0 = np.where(den < 0.0, np.maximum(t0, tk), t0)
        t1 = np.where((den == 0.0) & (num < 0.0), -np.inf, t1)
    return t0, t1


def _pieces(q, h):
    """Convex pieces of the chamber: (radius, nx, nz, c) for the main chamber and the bowl."""
    R, t, rb, db = q[P_R], q[P_TAN], q[P_RB], q[P_DB]
    if t > 0.0:
        main = (R, np.array([t, -t, 0.0]), np.array([1.0, 1.0, -1.0]), np.array([R * t, R * t, h]))
    else:
        main = (R, np.array([0.0, 0.0]), np.array([1.0, -1.0]), np.array([0.0, h]))
    out = [main]
    if rb > 0.0:
        out.append((rb, np.array([0.0, 0.0]), np.array([1.0, -1.0]), np.array([-h, h + db])))
    return out


def _volume_area_from_intervals(t0, t1, w, r):
    """Sum over rays of w (min(r,t1)^3 - t0^3)/3 and r^2 w [t0 < r < t1], for all r at once."""
    ok = t1 > t0
    t0, t1, w = t0[ok], t1[ok], w[ok]
    i0 = np.argsort(t0)
    i1 = np.argsort(t1)
    s0, s1 = t0[i0], t1[i1]
    cw0 = np.concatenate([[0.0], np.cumsum(w[i0])])
    cl0 = np.concatenate([[0.0], np.cumsum(w[i0] * s0 ** 3)])
    cw1 = np.concatenate([[0.0], np.cumsum(w[i1])])
    ch1 = np.concatenate([[0.0], np.cumsum(w[i1] * s1 ** 3)])
    k0 = np.searchsorted(s0, r, side="left")
    k1 = np.searchsorted(s1, r, side="right")
    open_w = cw0[k0] - cw1[k1]
    vol = (ch1[k1] - cl0[k0] + r ** 3 * open_w) / 3.0
    return vol, r * r * open_w


def burned_volume_and_front_area(q, h, r, n_polar: int = 160, n_azimuth: int = 320):
    """Burned volume [m^3] and flame front area [m^2] at radii ``r`` (array) [m], clearance ``h`` [m]."""
    d, w = ray_directions(n_polar, n_azimuth)
    r = np.asarray(r, dtype=float)
    vol = np.zeros_like(r)
    area = np.zeros_like(r)
    for radius, nx, nz, c in _pieces(q, h):
        t0, t1 = ray_interval(q[P_XP], q[P_YP], q[P_ZP], d[:, 0], d[:, 1], d[:, 2],
                              radius, nx, nz, c)
        v, a = _volume_area_from_intervals(t0, t1, w, r)
        vol += v
        area += a
    return vol, area


# ----------------------------------------------------------------------------
# latitude circles: front area, and the burned volume as its integral
# ----------------------------------------------------------------------------
def _arc_overlap(a0, a1, b0, b1):
    """Length of the intersection of arcs [a0, a1] and [b0, b1] on the circle (lengths <= 2 pi)."""
    two_pi = 2.0 * math.pi
    tot = 0.0
    for k in (-1.0, 0.0, 1.0):
        tot = tot + _overlap(a0, a1, b0 + k * two_pi, b1 + k * two_pi)
    return tot


def _disc_arc(rho, xp, yp, radius):
    """Arc [a0, a1] (absolute angle about the plug) of the circle of radius ``rho`` about
    (xp, yp) that lies inside the disc of ``radius`` about the bore axis."""
    d = math.hypot(xp, yp)
    psi_c = math.atan2(yp, xp)
    with np.errstate(divide="ignore", invalid="ignore"):
        kappa = (radius * radius - d * d - rho * rho) / (2.0 * d * np.maximum(rho, 1e-300))
    if d == 0.0:
        kappa = np.where(rho <= radius, 2.0, -2.0) + 0.0 * rho
    ac = np.arccos(np.clip(kappa, -1.0, 1.0))
    return psi_c + ac, psi_c + 2.0 * math.pi - ac


def front_area(q, h, r, n_theta: int = 2000):
    """Flame front area [m^2] at radii ``r`` (array) [m] and clearance height ``h`` [m].

    The sphere is cut into latitude circles about the vertical through the
    plug (midpoints in the polar angle theta); the part of each circle inside
    the chamber's horizontal section at its height is exact: an arc inside a
    disc (bore, bowl) and, in a pent roof, inside the slab |x| <= R - z/tan(a).
    A_f = r^2 sum sin(theta) dtheta (inside arc).
    """
    R, t, rb, db, xp, yp, zp = (q[i] for i in range(7))
    r = np.asarray(r, dtype=float)[:, None]
    th = (np.arange(n_theta) + 0.5) * (math.pi / n_theta)
    z = zp + r * np.cos(th)
    rho = r * np.sin(th)
    a0, a1 = _disc_arc(rho, xp, yp, R)
    arc = a1 - a0
    if t > 0.0:  # in the roof, the arc also inside the slab |x| <= w
        w = np.maximum(R - z / t, 0.0)
        with np.errstate(divide="ignore", invalid="ignore"):
            lo = np.clip((-w - xp) / rho, -1.0, 1.0)
            hi = np.clip((w - xp) / rho, -1.0, 1.0)
        c_hi, c_lo = np.arccos(hi), np.arccos(lo)  # x <= w from c_hi, x >= -w up to c_lo
        slab = _arc_overlap(a0, a1, c_hi, c_lo) + _arc_overlap(a0, a1, -c_lo, -c_hi)
        arc = np.where(z > 0.0, slab, arc)
        top = np.where(z > 0.0, z <= t * R, z <= 0.0)
    else:
        top = z <= 0.0
    arc = np.where(top & (z >= -h), arc, 0.0)
    if rb > 0.0:
        b0, b1 = _disc_arc(rho, xp, yp, rb)
        arc = np.where((z < -h) & (z >= -h - db), b1 - b0, arc)
    arc = np.maximum(arc, 0.0)  # rounding of the arc ends
    return (r[:, 0] ** 2) * (arc * np.sin(th)).sum(axis=1) * (math.pi / n_theta)


def burned_volume(q, h, r, n_theta: int = 2000, n_sub: int = 8):
    """Burned volume [m^3] at radii ``r`` (increasing array from 0) [m]: the integral of
    :func:`front_area` over the radius (trapezoid rule on ``n_sub`` sub-steps per interval)."""
    r = np.asarray(r, dtype=float)
    fine = np.concatenate([[r[0]], (r[:-1, None] + np.diff(r)[:, None]
                                    * (np.arange(1, n_sub + 1) / n_sub)).ravel()])
    a = front_area(q, h, fine, n_theta)
    cum = np.concatenate([[0.0], np.cumsum(0.5 * (a[1:] + a[:-1]) * np.diff(fine))])
    return cum[::n_sub]


# ----------------------------------------------------------------------------
# wetted areas
# ----------------------------------------------------------------------------
def _overlap(a0, a1, b0, b1):
    return np.maximum(np.minimum(a1, b1) - np.maximum(a0, b0), 0.0)


def plane_area_in_ball(r, z0, slope, disc_radius, phi_a, phi_b, xp, yp, zp, n: int = 1200,
                       inner_radius: float = 0.0):
    """Area [m^2] of the face z = z0 + slope x over the disc x^2 + y^2 <= disc_radius^2 (less
    the disc of ``inner_radius``), for x = -disc_radius cos(phi) with phi in [phi_a, phi_b],
    inside balls of radii ``r`` about (xp, yp, zp); ``r`` an array (R,), result (R,)."""
    phi = phi_a + (np.arange(n) + 0.5) * ((phi_b - phi_a) / n)
    x = -disc_radius * np.cos(phi)
    dx = disc_radius * np.sin(phi) * ((phi_b - phi_a) / n)
    half = disc_radius * np.sin(phi)  # the disc's half chord at x
    q = np.asarray(r, dtype=float)[:, None] ** 2 - (x - xp) ** 2 - (z0 + slope * x - zp) ** 2
    sq = np.sqrt(np.maximum(q, 0.0))
    chord = np.where(q > 0.0, _overlap(-half, half, yp - sq, yp + sq), 0.0)
    if inner_radius > 0.0:
        hi = np.sqrt(np.maximum(inner_radius ** 2 - x * x, 0.0))
        chord = chord - np.where(q > 0.0, _overlap(-hi, hi, yp - sq, yp + sq), 0.0)
    return math.sqrt(1.0 + slope * slope) * (chord * dx).sum(axis=1)


def wall_area_in_ball(r, radius, z_lo, z_hi, psi, xp, yp, zp):
    """Area [m^2] of the cylinder wall of ``radius`` between heights z_lo(psi) and z_hi(psi)
    (arrays over the azimuth midpoints ``psi``) inside balls of radii ``r`` (R,) about the plug."""
    dpsi = 2.0 * math.pi / psi.size
    d2 = (radius * np.cos(psi) - xp) ** 2 + (radius * np.sin(psi) - yp) ** 2
    q = np.asarray(r, dtype=float)[:, None] ** 2 - d2
    sq = np.sqrt(np.maximum(q, 0.0))
    length = np.where(q > 0.0, _overlap(z_lo, z_hi, zp - sq, zp + sq), 0.0)
    return radius * dpsi * length.sum(axis=1)


def wetted_areas(q, h, r, n: int = 1200):
    """Head, piston and liner areas [m^2] inside balls of radii ``r`` (array) at clearance ``h`` [m]."""
    R, t, rb, db, xp, yp, zp = (q[i] for i in range(7))
    r = np.asarray(r, dtype=float)
    psi = (np.arange(2 * n) + 0.5) * (math.pi / n)
    if t > 0.0:  # two faces, x < 0 (phi in [0, pi/2]) and x > 0, plus the end walls
        head = (plane_area_in_ball(r, R * t, t, R, 0.0, 0.5 * math.pi, xp, yp, zp, n)
                + plane_area_in_ball(r, R * t, -t, R, 0.5 * math.pi, math.pi, xp, yp, zp, n)
                + wall_area_in_ball(r, R, 0.0, t * R * (1.0 - np.abs(np.cos(psi))), psi, xp, yp, zp))
    else:
        head = plane_area_in_ball(r, 0.0, 0.0, R, 0.0, math.pi, xp, yp, zp, n)
    piston = plane_area_in_ball(r, -h, 0.0, R, 0.0, math.pi, xp, yp, zp, n, inner_radius=rb)
    if rb > 0.0:
        piston = (piston + plane_area_in_ball(r, -h - db, 0.0, rb, 0.0, math.pi, xp, yp, zp, n)
                  + wall_area_in_ball(r, rb, -h - db, -h, psi, xp, yp, zp))
    liner = wall_area_in_ball(r, R, -h, 0.0, psi, xp, yp, zp)
    return head, piston, liner


# ----------------------------------------------------------------------------
# tables
# ----------------------------------------------------------------------------
class FlameTables(NamedTuple):
    """Flame geometry on a grid of clearance heights (H,) and flame radii (N,); tables (H, N)."""

    clearance_height_m: np.ndarray
    radius_m: np.ndarray
    burned_volume_m3: np.ndarray
    front_area_m2: np.ndarray
    head_wetted_m2: np.ndarray
    piston_wetted_m2: np.ndarray
    liner_wetted_m2: np.ndarray


def flame_tables(q, clearance_height_m, n_radius: int = 96, n_theta: int = 2000,
                 n_wall: int = 1200) -> FlameTables:
    """Tabulate the flame geometry of chamber ``q`` (:meth:`ChamberShape.parameters`).

    The radii run uniformly from 0 to :func:`max_radius` at the largest clearance height.
    """
    hs = np.asarray(clearance_height_m, dtype=float)
    r = np.linspace(0.0, max_radius(q, float(hs.max())), n_radius)
    out = [np.empty((hs.size, r.size)) for _ in range(5)]
    for i, h in enumerate(hs):
        a = front_area(q, h, r, n_theta)
        v = burned_volume(q, h, r, n_theta)
        hd, ps, ln = wetted_areas(q, h, r, n_wall)
        for tab, val in zip(out, (v, a, hd, ps, ln)):
            tab[i] = val
    return FlameTables(hs, r, *out)


def bilinear(x_grid, y_grid, table, x, y):
    """Bilinear interpolation of ``table`` (len(x_grid), len(y_grid)) at the scalar (x, y),
    clamped to the grid (numba-compilable)."""
    nx, ny = x_grid.size, y_grid.size
    i = min(max(np.searchsorted(x_grid, x) - 1, 0), nx - 2)
    j = min(max(np.searchsorted(y_grid, y) - 1, 0), ny - 2)
    u = min(max((x - x_grid[i]) / (x_grid[i + 1] - x_grid[i]), 0.0), 1.0)
    v = min(max((y - y_grid[j]) / (y_grid[j + 1] - y_grid[j]), 0.0), 1.0)
    return ((1 - u) * (1 - v) * table[i, j] + u * (1 - v) * table[i + 1, j]
            + (1 - u) * v * table[i, j + 1] + u * v * table[i + 1, j + 1])
