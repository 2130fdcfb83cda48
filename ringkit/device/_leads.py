"""Private: lead specifications of multi-terminal rings (used by :mod:`ringkit.device.geometry`).

Every lead is a horizontal strip attached on the left half (running along -x) or the right
half (along +x) of the ring; see docs/multiterminal.md ("Lead layout", "Gauge").
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from ringkit._validation import ParameterError

if TYPE_CHECKING:
    from ringkit.device.geometry import RingGeometry

__all__ = ["LeadSpec", "MAX_LEADS", "lead_side"]

MAX_LEADS = 4
_TWO_PI = 2.0 * math.pi


@dataclass(frozen=True)
class LeadSpec:
    """One lead of a ring: a horizontal strip attached at polar angle ``angle``.

    Attributes
    ----------
    angle : float
        Attachment angle in rad on the ring's centre line; the left half (pi/2, 3pi/2) gives
        a lead along -x, the right half (-pi/2, pi/2) a lead along +x.
    width : float or None
        Strip width in m (None: the geometry's ``lead_width``; always None for a chain).
    """

    angle: float
    width: float | None = None

    @classmethod
    def coerce(cls, obj: Any, name: str) -> LeadSpec:
        """A LeadSpec from a LeadSpec, a mapping ``{angle, width}`` or a pair."""
        if isinstance(obj, LeadSpec):
            return obj
        try:
            if isinstance(obj, dict):
                return cls(float(obj["angle"]), _opt_float(obj.get("width")))
            seq = tuple(obj) if not isinstance(obj, (int, float)) else (obj,)
            return cls(float(seq[0]), _opt_float(seq[1]) if len(seq) > 1 else None)
        except (KeyError, TypeError, ValueError, IndexError):
            raise ParameterError(
                name, obj, "must be a LeadSpec(angle, width), {'angle':..., 'width':...} or a pair"
            ) from None


def _opt_float(v: Any) -> float | None:
    return None if v is None else float(v)


def lead_side(angle: float) -> int:
    """-1 for an attachment on the left half (lead along -x), +1 on the right, 0 on the y axis."""
    c = math.cos(float(angle))
    if abs(c) < 1e-12:
        return 0
    return -1 if c < 0 else 1


def norm_side(angle: float, name: str) -> float:
    """Left-half angles to [0, 2pi), right-half ones to (-pi, pi]; refuse the y axis."""
    side = lead_side(angle)
    if side == 0:
        raise ParameterError(
            name,
            angle,
            "must lie in the left half (pi/2, 3pi/2) or the right half (-pi/2, pi/2) of the "
            "ring: leads run along -x or +x (docs/multiterminal.md)",
            "rad",
        )
    return norm_left(angle) if side < 0 else norm_right(angle)


def norm_left(angle: float) -> float:
    """Map an angle to [0, 2pi) and check it lies in (pi/2, 3pi/2)."""
    a = float(angle) % _TWO_PI
    if not (math.pi / 2 < a < 1.5 * math.pi):
        raise ParameterError(
            "lead_angles[0]", angle, "must lie in (pi/2, 3 pi/2) rad (left half of the ring)"
        )
    return a


def norm_right(angle: float) -> float:
    """Map an angle to (-pi, pi] and check it lies in (-pi/2, pi/2)."""
    a = math.remainder(float(angle), _TWO_PI)
    if not (-math.pi / 2 < a < math.pi / 2):
        raise ParameterError(
            "lead_angles[1]", angle, "must lie in (-pi/2, pi/2) rad (right half of the ring)"
        )
    return a


def checked_extra_leads(geo: RingGeometry) -> tuple[LeadSpec, ...]:
    """The geometry's ``extra_leads`` as normalised :class:`LeadSpec` (validated)."""
    raw = geo.extra_leads
    if raw is None:
        raw = ()
    if isinstance(raw, (LeadSpec, dict)):
        raw = (raw,)
    specs = [LeadSpec.coerce(x, f"extra_leads[{k}]") for k, x in enumerate(raw)]
    if len(specs) > MAX_LEADS - 2:
        raise ParameterError(
            "leads", len(specs) + 2, f"must be 2 to {MAX_LEADS} leads (got {len(specs) + 2})"
        )
    out = []
    for k, spec in enumerate(specs):
        angle = norm_side(spec.angle, f"leads[{k + 2}].angle")
        width = spec.width
        if geo.shape == "chain":
            if width is not None:
                raise ParameterError(
                    f"leads[{k + 2}].width", width, "must be None for a chain (1D leads)", "m"
                )
        out.append(LeadSpec(angle, width))
    return tuple(out)


def _lead_y_range(geo: RingGeometry, index: int) -> tuple[float, float]:
    yc = geo.lead_center(index)
    w = geo.lead_width_of(index) or 0.0
    return yc - w / 2, yc + w / 2


def check_lead_overlap(geo: RingGeometry) -> None:
    """Refuse strips on the same side that overlap in y."""
    n = geo.n_leads
    for i in range(n):
        for j in range(i + 1, n):
            if geo.lead_side(i) != geo.lead_side(j):
                continue
            lo_i, hi_i = _lead_y_range(geo, i)
            lo_j, hi_j = _lead_y_range(geo, j)
            if min(hi_i, hi_j) > max(lo_i, lo_j):
                side = "left" if geo.lead_side(i) < 0 else "right"
                raise ParameterError(
                    "leads",
                    [round(s.angle, 6) for s in geo.leads],
                    f"leads {i} and {j} on the {side} side overlap (strips y in "
                    f"[{lo_i:.4g}, {hi_i:.4g}] and [{lo_j:.4g}, {hi_j:.4g}] m); allowed: "
                    "strips on the same side separated in y, i.e. |y_i - y_j| >= "
                    "(w_i + w_j)/2 with y = r sin(angle) (move an angle or narrow a lead)",
                )


def check_distinct_chain_leads(geo: RingGeometry) -> None:
    """Refuse two chain leads at the same angle."""
    angles = [s.angle % _TWO_PI for s in geo.leads]
    for i in range(len(angles)):
        for j in range(i + 1, len(angles)):
            d = abs(math.remainder(angles[i] - angles[j], _TWO_PI))
            if d < 1e-9:
                raise ParameterError(
                    "leads",
                    [round(a, 6) for a in angles],
                    f"leads {i} and {j} attach at the same angle; allowed: distinct angles "
                    "(at least one lattice site apart)",
                )


def lead_outlines(geo: RingGeometry, length_factor: float = 0.6) -> list[dict[str, Any]]:
    """Outline of every lead for drawing the device (m).

    Returns one dict per lead (terminal order) with ``index``, ``angle`` [rad], ``side``
    (-1: along -x, +1: along +x), ``width`` [m] (0 for a chain), ``attach`` (x, y) of
    the attachment point on the centre line, and ``polygon`` (4, 2): the horizontal strip
    from the attachment point out to ``|x| = outer_extent * (1 + length_factor)``.
    """
    out = []
    x_far = geo.outer_extent * (1.0 + float(length_factor))
    for idx, spec in enumerate(geo.leads):
        side = geo.lead_side(idx)
        yc = geo.lead_center(idx)
        x0 = float(geo._centreline_point(np.array([spec.angle]))[0, 0])
        w = spec.width or 0.0
        poly = np.array(
            [
                [x0, yc - w / 2],
                [side * x_far, yc - w / 2],
                [side * x_far, yc + w / 2],
                [x0, yc + w / 2],
            ]
        )
        out.append(
            dict(
                index=idx,
                angle=float(spec.angle),
                side=side,
                width=float(w),
                attach=(x0, float(yc)),
                polygon=poly,
            )
        )
    return out


def lead_param_names(idx: int) -> tuple[str, str]:
    """Parameter names of the angle and width of lead ``idx`` (for error messages)."""
    if idx < 2:
        return f"lead_angles[{idx}]", "lead_width"
    return f"leads[{idx}].angle", f"leads[{idx}].width"


def split_leads(
    leads: Sequence[Any] | None, lead_angles: tuple[float, float], lead_width: float | None
) -> tuple[tuple[float, float], float | None, tuple[LeadSpec, ...]]:
    """``leads=[...]`` of a constructor -> (lead_angles, lead_width, extra_leads)."""
    if leads is None:
        return tuple(lead_angles), lead_width, ()
    specs = [LeadSpec.coerce(x, f"leads[{k}]") for k, x in enumerate(leads)]
    if not 2 <= len(specs) <= MAX_LEADS:
        raise ParameterError("leads", len(specs), f"must be 2 to {MAX_LEADS} leads")
    for k in (0, 1):
        if lead_side(specs[k].angle) != (-1 if k == 0 else 1):
            half = "left half (pi/2, 3pi/2)" if k == 0 else "right half (-pi/2, pi/2)"
            raise ParameterError(
                f"leads[{k}].angle",
                specs[k].angle,
                f"must lie in the {half}: leads 0 and 1 are the source and drain of the "
                "two-terminal limit and define the upper/lower arms",
                "rad",
            )
    w0, w1 = specs[0].width, specs[1].width
    if w0 is not None and w1 is not None and not math.isclose(w0, w1, rel_tol=1e-12):
        raise ParameterError(
            "leads[1].width",
            w1,
            f"must equal leads[0].width = {w0:g} m (leads 0 and 1 share "
            "lead_width; leads 2 and 3 may differ)",
            "m",
        )
    width = w0 if w0 is not None else (w1 if w1 is not None else lead_width)
    return (specs[0].angle, specs[1].angle), width, tuple(specs[2:])
