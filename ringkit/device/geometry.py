"""Ring geometries in SI units: circular, rectangular and one-dimensional (chain) rings.

API
---
RingGeometry
    Frozen dataclass with constructors ``circular``, ``from_mean_radius``, ``rectangular``,
    ``chain``; vectorised shape predicates used by the lattice builder.

Conventions
-----------
* The ring is centred at the origin; x points from the left (source, lead 0) to the right
  (drain, lead 1) lead; both leads are horizontal strips running along -x and +x.
* ``lead_angles = (left, right)`` are the polar angles (rad) of the attachment points on the
  centre line; left in (pi/2, 3pi/2), right in (-pi/2, pi/2). The *upper* arm is the part
  of the ring swept counter-clockwise from the right to the left attachment angle, the *lower*
  arm the rest; unequal angles give arms of unequal length.
* Circular ring: both arms share the centre line ``r_m = (r_in + r_out)/2``; an arm of width w
  covers ``|r - r_m| <= w/2``; ``r_in``/``r_out`` are the envelope radii (``r_out - r_in`` is
  the widest arm).
* Rectangular ring: outer box ``length x height``; vertical bars of width ``side_width``, top
  bar ``width_upper``, bottom bar ``width_lower``; ``r_in``/``r_out`` are the radii of circles
  with the hole area and the outer area (so ``pi r_in^2 .. pi r_out^2`` brackets the h/e band).
* Chain: a single-channel ring of sites on a circle of radius ``r_in = r_out``.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np

from ringkit._validation import ParameterError, check_choice, check_positive

__all__ = ["RingGeometry", "SHAPES"]

SHAPES: tuple[str, ...] = ("circular", "rectangular", "chain")
_TWO_PI = 2.0 * math.pi


def _attachment_angles(geo: RingGeometry) -> np.ndarray:
    """Lead attachment angles mapped to [0, 2 pi)."""
    return np.mod(np.asarray(geo.lead_angles, float), _TWO_PI)


def _norm_left(angle: float) -> float:
    """Map an angle to [0, 2pi) and check it lies in (pi/2, 3pi/2)."""
    a = float(angle) % _TWO_PI
    if not (math.pi / 2 < a < 1.5 * math.pi):
        raise ParameterError(
            "lead_angles[0]", angle, "must lie in (pi/2, 3 pi/2) rad (left half of the ring)"
        )
    return a


def _norm_right(angle: float) -> float:
    """Map an angle to (-pi, pi] and check it lies in (-pi/2, pi/2)."""
    a = math.remainder(float(angle), _TWO_PI)
    if not (-math.pi / 2 < a < math.pi / 2):
        raise ParameterError(
            "lead_angles[1]", angle, "must lie in (-pi/2, pi/2) rad (right half of the ring)"
        )
    return a


@dataclass(frozen=True)
class RingGeometry:
    """Shape of the ring and of its two leads, in metres and radians.

    Use the constructors :meth:`circular`, :meth:`from_mean_radius`, :meth:`rectangular` or
    :meth:`chain` rather than the raw fields.

    Attributes
    ----------
    shape : {"circular", "rectangular", "chain"}
    r_in, r_out : float
        Inner and outer (envelope) radius in m; equal-area radii for rectangles; the chain
        radius for chains.
    width_upper, width_lower : float
        Widths of the two arms in m (0 for a chain).
    lead_angles : tuple of float
        Attachment angles (left, right) in rad.
    lead_width : float or None
        Width of both lead strips in m (None for a chain: single channel).
    length, height, side_width : float or None
        Rectangle outer size and vertical-bar width in m.
    n_sites : int or None
        Number of chain sites (None: chosen from the lattice spacing).
    """

    shape: Literal["circular", "rectangular", "chain"]
    r_in: float
    r_out: float
    width_upper: float
    width_lower: float
    lead_angles: tuple[float, float] = (math.pi, 0.0)
    lead_width: float | None = None
    length: float | None = None
    height: float | None = None
    side_width: float | None = None
    n_sites: int | None = None

    # ------------------------------------------------------------------ constructors
    @classmethod
    def circular(
        cls,
        r_in: float,
        r_out: float,
        *,
        width_upper: float | None = None,
        width_lower: float | None = None,
        lead_angles: tuple[float, float] = (math.pi, 0.0),
        lead_width: float | None = None,
    ) -> RingGeometry:
        """Circular ring between ``r_in`` and ``r_out`` [m].

        ``width_upper``/``width_lower`` [m] default to ``r_out - r_in`` (a narrower arm is
        centred on the mean radius); ``lead_width`` [m] defaults to ``r_out - r_in``.
        """
        r_in = check_positive("r_in", r_in, "m")
        r_out = check_positive("r_out", r_out, "m")
        if not r_out > r_in:
            raise ParameterError("r_in", r_in, f"must be < r_out = {r_out:g} m", "m")
        w = r_out - r_in
        return cls(
            shape="circular",
            r_in=r_in,
            r_out=r_out,
            width_upper=w if width_upper is None else width_upper,
            width_lower=w if width_lower is None else width_lower,
            lead_angles=tuple(lead_angles),
            lead_width=w if lead_width is None else lead_width,
        )

    @classmethod
    def from_mean_radius(cls, radius: float, width: float, **kwargs: Any) -> RingGeometry:
        """Circular ring of mean radius ``radius`` [m] and arm width ``width`` [m]."""
        radius = check_positive("radius", radius, "m")
        width = check_positive("width", width, "m")
        if not width < 2 * radius:
            raise ParameterError("width", width, f"must be < 2 * radius = {2 * radius:g} m", "m")
        return cls.circular(radius - width / 2, radius + width / 2, **kwargs)

    @classmethod
    def rectangular(
        cls,
        length: float,
        height: float,
        width: float,
        *,
        width_upper: float | None = None,
        width_lower: float | None = None,
        lead_angles: tuple[float, float] = (math.pi, 0.0),
        lead_width: float | None = None,
    ) -> RingGeometry:
        """Rectangular (square for ``length == height``) ring, outer size ``length x height``.

        ``width`` [m] is the width of the vertical bars; ``width_upper``/``width_lower`` [m]
        (default ``width``) those of the top and bottom bars; ``lead_width`` defaults to
        ``width``.
        """
        length = check_positive("length", length, "m")
        height = check_positive("height", height, "m")
        width = check_positive("width", width, "m")
        wu = width if width_upper is None else check_positive("width_upper", width_upper, "m")
        wl = width if width_lower is None else check_positive("width_lower", width_lower, "m")
        if not 2 * width < length:
            raise ParameterError("width", width, f"must be < length/2 = {length / 2:g} m", "m")
        if not wu + wl < height:
            raise ParameterError(
                "width_upper", wu, f"width_upper + width_lower must be < height = {height:g} m", "m"
            )
        a_in = (length - 2 * width) * (height - wu - wl)
        return cls(
            shape="rectangular",
            r_in=math.sqrt(a_in / math.pi),
            r_out=math.sqrt(length * height / math.pi),
            width_upper=wu,
            width_lower=wl,
            lead_angles=tuple(lead_angles),
            lead_width=width if lead_width is None else lead_width,
            length=length,
            height=height,
            side_width=width,
        )

    @classmethod
    def chain(
        cls,
        radius: float,
        *,
        n_sites: int | None = None,
        lead_angles: tuple[float, float] = (math.pi, 0.0),
    ) -> RingGeometry:
        """Strictly one-dimensional single-channel ring of radius ``radius`` [m].

        ``n_sites`` (>= 4) fixes the number of sites; by default it follows from the lattice
        spacing chosen by :class:`ringkit.device.RingDevice`.
        """
        radius = check_positive("radius", radius, "m")
        return cls(
            shape="chain",
            r_in=radius,
            r_out=radius,
            width_upper=0.0,
            width_lower=0.0,
            lead_angles=tuple(lead_angles),
            lead_width=None,
            n_sites=n_sites,
        )

    # ------------------------------------------------------------------ validation
    def __post_init__(self) -> None:
        set_ = lambda k, v: object.__setattr__(self, k, v)  # noqa: E731 (frozen dataclass)
        check_choice("shape", self.shape, SHAPES)
        if len(tuple(self.lead_angles)) != 2:
            raise ParameterError("lead_angles", self.lead_angles, "must be a pair (left, right)")
        left, right = self.lead_angles
        set_("lead_angles", (_norm_left(left), _norm_right(right)))
        set_("r_in", check_positive("r_in", self.r_in, "m"))
        set_("r_out", check_positive("r_out", self.r_out, "m"))
        if self.shape == "chain":
            if self.r_out != self.r_in:
                raise ParameterError("r_out", self.r_out, "must equal r_in for a chain", "m")
            if self.n_sites is not None:
                n = int(self.n_sites)
                if n != self.n_sites or n < 4:
                    raise ParameterError("n_sites", self.n_sites, "must be an integer >= 4")
                set_("n_sites", n)
            set_("width_upper", 0.0)
            set_("width_lower", 0.0)
            set_("lead_width", None)
            return
        if self.n_sites is not None:
            raise ParameterError("n_sites", self.n_sites, "only a chain ring has n_sites")
        if not self.r_out > self.r_in:
            raise ParameterError("r_in", self.r_in, f"must be < r_out = {self.r_out:g} m", "m")
        for key in ("width_upper", "width_lower"):
            w = check_positive(key, getattr(self, key), "m")
            if self.shape == "circular" and w > (self.r_out - self.r_in) * (1 + 1e-12):
                raise ParameterError(
                    key, w, f"must be <= r_out - r_in = {self.r_out - self.r_in:g} m", "m"
                )
            set_(key, w)
        if self.shape == "rectangular":
            for key in ("length", "height", "side_width"):
                if getattr(self, key) is None:
                    raise ParameterError(key, None, "required for a rectangular ring", "m")
        lw = check_positive("lead_width", self.lead_width, "m")
        set_("lead_width", lw)
        for side in (0, 1):
            yc = self.lead_center(side)
            lo, hi = self._centreline_y_range()
            room = 2 * min(hi - yc, yc - lo)
            if room <= 0:
                raise ParameterError(
                    f"lead_angles[{side}]",
                    self.lead_angles[side],
                    "must hit the ring's left/right side (attachment outside the centre line)",
                )
            if lw > room * (1 + 1e-12):
                raise ParameterError(
                    "lead_width",
                    lw,
                    f"must be <= {room:.6g} m: the lead is wider than the ring at its attachment "
                    f"point (the strip must stay within {lo:.6g} <= y <= {hi:.6g} m)",
                    "m",
                )

    # ------------------------------------------------------------------ derived sizes
    @property
    def mean_radius(self) -> float:
        """Mean radius in m (``sqrt(area_mean/pi)`` for a rectangle)."""
        if self.shape == "rectangular":
            return math.sqrt(self.area_mean / math.pi)
        return 0.5 * (self.r_in + self.r_out)

    @property
    def arm_angles(self) -> tuple[float, float]:
        """Angular extents (upper, lower) of the two arms in rad (sum 2 pi)."""
        left, right = self.lead_angles
        up = (left - right) % _TWO_PI
        return up, _TWO_PI - up

    @property
    def max_arm_width(self) -> float:
        """Widest arm (or bar) in m; 0 for a chain."""
        if self.shape == "rectangular":
            return max(self.width_upper, self.width_lower, float(self.side_width))
        return max(self.width_upper, self.width_lower)

    @property
    def min_arm_width(self) -> float:
        """Narrowest arm (or bar) in m; 0 for a chain."""
        if self.shape == "rectangular":
            return min(self.width_upper, self.width_lower, float(self.side_width))
        return min(self.width_upper, self.width_lower)

    def _sector_area(self, offset: float) -> float:
        du, dl = self.arm_angles
        rm = self.mean_radius
        ru = rm + offset * self.width_upper / 2
        rl = rm + offset * self.width_lower / 2
        return 0.5 * (du * ru**2 + dl * rl**2)

    @property
    def area_inner(self) -> float:
        """Area of the hole in m^2 (lower edge of the h/e band: ``area_inner/(h/e)``)."""
        if self.shape == "chain":
            return math.pi * self.r_in**2
        if self.shape == "rectangular":
            return (self.length - 2 * self.side_width) * (
                self.height - self.width_upper - self.width_lower
            )
        return self._sector_area(-1.0)

    @property
    def area_outer(self) -> float:
        """Area inside the outer edge in m^2 (upper edge of the h/e band)."""
        if self.shape == "chain":
            return math.pi * self.r_out**2
        if self.shape == "rectangular":
            return self.length * self.height
        return self._sector_area(+1.0)

    @property
    def area_mean(self) -> float:
        """Area enclosed by the centre line in m^2 (usual single-number AB area)."""
        if self.shape == "rectangular":
            lo, hi = self._centreline_y_range()
            return (self.length - self.side_width) * (hi - lo)
        return math.pi * (0.5 * (self.r_in + self.r_out)) ** 2

    @property
    def arm_lengths(self) -> tuple[float, float]:
        """Centre-line lengths (upper, lower) of the two arms in m."""
        du, dl = self.arm_angles
        if self.shape != "rectangular":
            return self.mean_radius * du, self.mean_radius * dl
        # the centre line is straight between corners: sample at the corners and attachment
        # points exactly, so the polyline length is exact
        xc = (self.length - self.side_width) / 2
        lo, hi = self._centreline_y_range()
        corners = np.arctan2([hi, hi, lo, lo], [xc, -xc, -xc, xc]) % _TWO_PI
        phi = np.unique(
            np.concatenate([np.linspace(0.0, _TWO_PI, 65), corners, _attachment_angles(self)])
        )
        xy = self._centreline_point(phi)
        seg = np.hypot(*np.diff(xy, axis=1))
        mid = 0.5 * (phi[1:] + phi[:-1])
        up = self.is_upper(mid)
        return float(seg[up].sum()), float(seg[~up].sum())

    def _centreline_y_range(self) -> tuple[float, float]:
        if self.shape == "rectangular":
            return -(self.height - self.width_lower) / 2, (self.height - self.width_upper) / 2
        rm = 0.5 * (self.r_in + self.r_out)
        return -rm, rm

    def _centreline_point(self, phi: np.ndarray) -> np.ndarray:
        """Points (2, n) where rays at angles ``phi`` hit the centre line."""
        c, s = np.cos(phi), np.sin(phi)
        if self.shape != "rectangular":
            return self.mean_radius * np.array([c, s])
        xc = (self.length - self.side_width) / 2
        lo, hi = self._centreline_y_range()
        with np.errstate(divide="ignore"):
            sx = np.where(c != 0, xc / np.abs(c), np.inf)
            sy = np.where(
                s > 0,
                hi / np.where(s > 0, s, 1),
                np.where(s < 0, -lo / np.where(s < 0, -s, 1), np.inf),
            )
        dist = np.minimum(sx, sy)
        return np.array([dist * c, dist * s])

    def lead_center(self, side: int) -> float:
        """y coordinate in m of the centre of the lead strip (0 = left, 1 = right)."""
        angle = self.lead_angles[side]
        if self.shape == "rectangular":
            xc = (self.length - self.side_width) / 2
            return float(xc * abs(math.tan(angle)) * math.copysign(1.0, math.sin(angle)))
        return 0.5 * (self.r_in + self.r_out) * math.sin(angle)

    # ------------------------------------------------------------------ shape predicates
    def is_upper(self, phi: np.ndarray) -> np.ndarray:
        """True where polar angle ``phi`` [rad] belongs to the upper arm.

        A point exactly on an attachment ray belongs to the arm that starts there going
        counter-clockwise (on the right lead's ray: upper; on the left lead's ray: lower).
        """
        du, _ = self.arm_angles
        return np.mod(np.asarray(phi) - self.lead_angles[1], _TWO_PI) < du

    def _arm_width_at(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        return np.where(self.is_upper(np.arctan2(y, x)), self.width_upper, self.width_lower)

    def ring_mask(self, x: np.ndarray, y: np.ndarray, tol: float = 0.0) -> np.ndarray:
        """True for points (x, y) [m] inside the ring material (boundaries included).

        ``tol`` [m] widens the boundaries slightly (used with lattice points exactly on an
        edge, so that the result does not depend on rounding).
        """
        x, y = np.asarray(x, float), np.asarray(y, float)
        if self.shape == "chain":
            raise ParameterError("shape", self.shape, "a chain has no 2D extent")
        if self.shape == "rectangular":
            xo, yo = self.length / 2 + tol, self.height / 2 + tol
            in_box = (np.abs(x) <= xo) & (np.abs(y) <= yo)
            return in_box & ~self.hole_mask(x, y, tol)
        r = np.hypot(x, y)
        half = 0.5 * self._arm_width_at(x, y) + tol
        return np.abs(r - self.mean_radius) <= half

    def hole_mask(self, x: np.ndarray, y: np.ndarray, tol: float = 0.0) -> np.ndarray:
        """True for points (x, y) [m] strictly inside the hole."""
        x, y = np.asarray(x, float), np.asarray(y, float)
        if self.shape == "rectangular":
            xh = self.length / 2 - self.side_width - tol
            top = self.height / 2 - self.width_upper - tol
            bottom = -self.height / 2 + self.width_lower + tol
            return (np.abs(x) < xh) & (y > bottom) & (y < top)
        r = np.hypot(x, y)
        return r < self.mean_radius - 0.5 * self._arm_width_at(x, y) - tol

    @property
    def outer_extent(self) -> float:
        """Largest |x| of the ring material in m."""
        if self.shape == "rectangular":
            return self.length / 2
        return self.mean_radius + 0.5 * self.max_arm_width

    # ------------------------------------------------------------------ I/O
    def to_dict(self) -> dict[str, Any]:
        """Plain dict of the fields (JSON-serialisable)."""
        d = dataclasses.asdict(self)
        d["lead_angles"] = list(self.lead_angles)
        return d

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> RingGeometry:
        """Inverse of :meth:`to_dict`."""
        data = dict(data)
        data["lead_angles"] = tuple(data["lead_angles"])
        return cls(**data)
