"""Ring geometries in SI units: circular, rectangular and one-dimensional (chain) rings.

API
---
RingGeometry
    Frozen dataclass with constructors ``circular``, ``from_mean_radius``, ``rectangular``,
    ``chain``; vectorised shape predicates used by the lattice builder.
LeadSpec
    One lead: attachment angle (rad) and strip width (m). ``leads=[...]`` (2 to 4 specs) in
    the constructors describes multi-terminal rings (docs/multiterminal.md).

Conventions
-----------
* The ring is centred at the origin; x points from the left (source, lead 0) to the right
  (drain, lead 1) lead; both leads are horizontal strips running along -x and +x.
* Leads 2 and 3 (``extra_leads``, optional) are horizontal strips too, running along -x from
  an attachment on the left half of the ring or along +x from the right half (never
  vertical: the uniform-field gauge A = (-By, 0) is exact only for field-free leads along x,
  docs/multiterminal.md "Gauge"). Strips on the same side must not overlap.
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
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np

from ringkit._validation import ParameterError, check_choice, check_positive
from ringkit.device._leads import (
    MAX_LEADS,
    LeadSpec,
    check_distinct_chain_leads,
    check_lead_overlap,
    checked_extra_leads,
    lead_param_names,
    lead_side,
    norm_left,
    norm_right,
    split_leads,
)
from ringkit.device._leads import lead_outlines as _lead_outlines

__all__ = ["RingGeometry", "LeadSpec", "SHAPES", "MAX_LEADS"]

SHAPES: tuple[str, ...] = ("circular", "rectangular", "chain")
_TWO_PI = 2.0 * math.pi


def _attachment_angles(geo: RingGeometry) -> np.ndarray:
    """Lead attachment angles mapped to [0, 2 pi)."""
    return np.mod(np.asarray(geo.lead_angles, float), _TWO_PI)


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
    extra_leads : tuple of LeadSpec
        Leads 2 and 3 (empty for a two-terminal ring); ``leads`` lists all of them.
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
    extra_leads: tuple[LeadSpec, ...] = ()

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
        leads: Sequence[LeadSpec] | None = None,
    ) -> RingGeometry:
        """Circular ring between ``r_in`` and ``r_out`` [m].

        ``width_upper``/``width_lower`` [m] default to ``r_out - r_in`` (a narrower arm is
        centred on the mean radius); ``lead_width`` [m] defaults to ``r_out - r_in``.
        ``leads`` (2 to 4 :class:`LeadSpec`) replaces ``lead_angles``/``lead_width``: leads 0
        (left half) and 1 (right half) share one width, leads 2 and 3 may have their own.
        """
        r_in = check_positive("r_in", r_in, "m")
        r_out = check_positive("r_out", r_out, "m")
        if not r_out > r_in:
            raise ParameterError("r_in", r_in, f"must be < r_out = {r_out:g} m", "m")
        w = r_out - r_in
        lead_angles, lead_width, extra = split_leads(leads, lead_angles, lead_width)
        return cls(
            shape="circular",
            r_in=r_in,
            r_out=r_out,
            width_upper=w if width_upper is None else width_upper,
            width_lower=w if width_lower is None else width_lower,
            lead_angles=tuple(lead_angles),
            lead_width=w if lead_width is None else lead_width,
            extra_leads=extra,
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
        leads: Sequence[LeadSpec] | None = None,
    ) -> RingGeometry:
        """Rectangular (square for ``length == height``) ring, outer size ``length x height``.

        ``width`` [m] is the width of the vertical bars; ``width_upper``/``width_lower`` [m]
        (default ``width``) those of the top and bottom bars; ``lead_width`` defaults to
        ``width``. ``leads``: as in :meth:`circular`.
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
        lead_angles, lead_width, extra = split_leads(leads, lead_angles, lead_width)
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
            extra_leads=extra,
        )

    @classmethod
    def chain(
        cls,
        radius: float,
        *,
        n_sites: int | None = None,
        lead_angles: tuple[float, float] = (math.pi, 0.0),
        leads: Sequence[LeadSpec | float] | None = None,
    ) -> RingGeometry:
        """Strictly one-dimensional single-channel ring of radius ``radius`` [m].

        ``n_sites`` (>= 4) fixes the number of sites; by default it follows from the lattice
        spacing chosen by :class:`ringkit.device.RingDevice`. ``leads``: 2 to 4 angles (or
        :class:`LeadSpec` without width) of single-channel leads.
        """
        radius = check_positive("radius", radius, "m")
        lead_angles, _, extra = split_leads(leads, lead_angles, None)
        return cls(
            shape="chain",
            r_in=radius,
            r_out=radius,
            width_upper=0.0,
            width_lower=0.0,
            lead_angles=tuple(lead_angles),
            lead_width=None,
            n_sites=n_sites,
            extra_leads=extra,
        )

    # ------------------------------------------------------------------ validation
    def __post_init__(self) -> None:
        set_ = lambda k, v: object.__setattr__(self, k, v)  # noqa: E731 (frozen dataclass)
        check_choice("shape", self.shape, SHAPES)
        if len(tuple(self.lead_angles)) != 2:
            raise ParameterError("lead_angles", self.lead_angles, "must be a pair (left, right)")
        left, right = self.lead_angles
        set_("lead_angles", (norm_left(left), norm_right(right)))
        set_("extra_leads", checked_extra_leads(self))
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
            check_distinct_chain_leads(self)
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
        for k, spec in enumerate(self.extra_leads):
            if spec.width is not None:
                check_positive(f"extra_leads[{k}].width", spec.width, "m")
        for idx in range(self.n_leads):
            yc = self.lead_center(idx)
            lo, hi = self._centreline_y_range()
            room = 2 * min(hi - yc, yc - lo)
            angle_name, width_name = lead_param_names(idx)
            if room <= 0:
                raise ParameterError(
                    angle_name,
                    self.leads[idx].angle,
                    "must hit the ring's left/right side (attachment outside the centre line)",
                )
            w = self.lead_width_of(idx)
            if w > room * (1 + 1e-12):
                raise ParameterError(
                    width_name,
                    w,
                    f"must be <= {room:.6g} m: the lead is wider than the ring at its attachment "
                    f"point (the strip must stay within {lo:.6g} <= y <= {hi:.6g} m)",
                    "m",
                )
        check_lead_overlap(self)

    # ------------------------------------------------------------------ leads
    @property
    def n_leads(self) -> int:
        """Number of leads (2 to 4)."""
        return 2 + len(self.extra_leads)

    @property
    def leads(self) -> tuple[LeadSpec, ...]:
        """All leads in terminal order, with resolved widths (None for a chain)."""
        first = tuple(LeadSpec(a, self.lead_width) for a in self.lead_angles)
        return first + tuple(
            LeadSpec(s.angle, self.lead_width if s.width is None else s.width)
            for s in self.extra_leads
        )

    def lead_width_of(self, index: int) -> float | None:
        """Strip width in m of lead ``index`` (None for a chain)."""
        return self.leads[index].width

    def lead_side(self, index: int) -> int:
        """-1 if lead ``index`` runs along -x (left half), +1 along +x (right half)."""
        return lead_side(self.leads[index].angle)

    def lead_outlines(self, length_factor: float = 0.6) -> list[dict[str, Any]]:
        """Outline of every lead for drawing the device (m).

        Returns one dict per lead (terminal order) with ``index``, ``angle`` [rad], ``side``
        (-1: along -x, +1: along +x), ``width`` [m] (0 for a chain), ``attach`` (x, y) of
        the attachment point on the centre line, and ``polygon`` (4, 2): the horizontal strip
        from the attachment point out to ``|x| = outer_extent * (1 + length_factor)``.
        """
        return _lead_outlines(self, length_factor)

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
        """y coordinate in m of the centre of the strip of lead ``side`` (0 = left, 1 = right,
        2 and 3 = the extra leads)."""
        angle = self.leads[side].angle
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
        if self.extra_leads:
            d["extra_leads"] = [{"angle": s.angle, "width": s.width} for s in self.extra_leads]
        else:
            d.pop("extra_leads")  # two-lead rings keep today's dict
        return d

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> RingGeometry:
        """Inverse of :meth:`to_dict`."""
        data = dict(data)
        data["lead_angles"] = tuple(data["lead_angles"])
        extra = data.get("extra_leads") or ()
        data["extra_leads"] = tuple(LeadSpec.coerce(x, "extra_leads") for x in extra)
        return cls(**data)
