"""The suspension corner file (DESIGN.md §4): load, validate, write, mirror, what-if copies.

Vehicle axes ISO 8855 (x forward, y left, z up), lengths in mm, stiffness in N/mm along the link
line, play in mm along the link line. A corner is one rigid wheel carrier held to the body by
exactly five two-ball-jointed links; two links may share a carrier point (a wishbone's ball joint).

``spin_axis`` is the outboard unit vector of the wheel's spin axis at design position, so it
carries static toe (``atan2(s_x, |s_y|)``, positive toe-in) and camber (``asin(-s_z)``, positive
top outboard).

Every refusal is a :class:`CornerFileError` whose text is one line naming the field, e.g.
``links[2].carrier: coincident with chassis point``.
"""
from __future__ import annotations

import json
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import ArrayLike

__all__ = [
    "CornerFileError",
    "Corner",
    "load_corner",
    "corner_from_dict",
    "corner_to_dict",
    "mirror_corner",
    "with_links",
    "line_matrix",
    "SPIN_AXIS_UNIT_TOL",
    "MIN_LINK_LENGTH_MM",
    "SINGULAR_COND_MAX",
    "N_LINKS",
]

N_LINKS = 5
SPIN_AXIS_UNIT_TOL = 1e-6  # | |s| − 1 | allowed for the spin axis
MIN_LINK_LENGTH_MM = 1.0  # shorter links are treated as zero-length (coincident points)
SINGULAR_COND_MAX = 1e8  # condition number of the length-scaled G above which it is singular
PARALLEL_TOL = 1e-9  # |cross| of unit directions below which two link lines coincide

_TOP_KEYS = {"name", "side", "wheel_centre", "spin_axis", "contact_patch", "links"}
_LINK_KEYS = {"name", "chassis", "carrier", "stiffness_N_per_mm", "play_mm"}


class CornerFileError(ValueError):
    """A corner file is refused; ``field`` names where, ``reason`` says why."""

    def __init__(self, field: str, reason: str):
        self.field = field
        self.reason = reason
        super().__init__(f"{field}: {reason}")


def _frozen(a: ArrayLike) -> np.ndarray:
    arr = np.array(a, dtype=float)
    arr.setflags(write=False)
    return arr


@dataclass(frozen=True, eq=False)
class Corner:
    """One validated suspension corner (immutable; arrays are read-only).

    Attributes (mm, N/mm, vehicle axes):
        name: label of the corner (demo data says "demo").
        side: "left" or "right".
        wheel_centre: (3,) design wheel centre.
        spin_axis: (3,) outboard unit spin axis at design position.
        contact_patch: (3,) design contact-patch centre.
        link_names: five link names, unique.
        chassis: (5, 3) body-side ball-joint centres.
        carrier: (5, 3) carrier-side ball-joint centres.
        stiffness: (5,) effective stiffness along each link line, N/mm.
        play: (5,) total free play along each link line, mm.
    """

    name: str
    side: str
    wheel_centre: np.ndarray
    spin_axis: np.ndarray
    contact_patch: np.ndarray
    link_names: tuple[str, ...]
    chassis: np.ndarray
    carrier: np.ndarray
    stiffness: np.ndarray
    play: np.ndarray

    @property
    def link_lengths(self) -> np.ndarray:
        """(5,) design link lengths, mm."""
        return np.linalg.norm(self.carrier - self.chassis, axis=1)

    def link_index(self, name: str) -> int:
        """Index of the link called ``name`` (ValueError if none)."""
        try:
            return self.link_names.index(name)
        except ValueError:
            raise ValueError(f"link: no link named {name!r} (have {list(self.link_names)})") from None


def line_matrix(chassis: np.ndarray, carrier: np.ndarray, wheel_centre: np.ndarray) -> np.ndarray:
    """G (6, 6): columns are the five unit link lines and the vertical line through the centre.

    Each column is the Plücker line vector ``[e, r × e]`` with ``e`` the unit direction from the
    chassis point to the carrier point and ``r`` the carrier point relative to the wheel centre
    (mm); the sixth column is ``[0, 0, 1, 0, 0, 0]`` (the held wheel-centre height).
    """
    d = carrier - chassis
    e = d / np.linalg.norm(d, axis=1, keepdims=True)
    m = np.cross(carrier - wheel_centre, e)
    g = np.zeros((6, 6))
    g[:3, :5] = e.T
    g[3:, :5] = m.T
    g[2, 5] = 1.0
    return g


def scaled_condition(g: np.ndarray, length_scale_mm: float) -> float:
    """Condition number of G with its moment rows divided by a characteristic length (mm)."""
    gs = g.copy()
    gs[3:, :] /= length_scale_mm
    return float(np.linalg.cond(gs))


def _vec3(raw: Any, field: str) -> np.ndarray:
    if not isinstance(raw, list | tuple) or len(raw) != 3:
        raise CornerFileError(field, "must be a list of three numbers [x, y, z]")
    for i, v in enumerate(raw):
        _number(v, f"{field}[{i}]")
    return np.array(raw, dtype=float)


def _number(raw: Any, field: str) -> float:
    if isinstance(raw, bool) or not isinstance(raw, int | float):
        raise CornerFileError(field, "must be a number")
    value = float(raw)
    if not math.isfinite(value):
        raise CornerFileError(field, "must be finite")
    return value


def _keys(raw: Mapping, allowed: set[str], where: str) -> None:
    unknown = sorted(set(raw) - allowed)
    if unknown:
        name = f"{where}.{unknown[0]}" if where else unknown[0]
        raise CornerFileError(name, "unknown key")
    missing = sorted(allowed - set(raw))
    if missing:
        name = f"{where}.{missing[0]}" if where else missing[0]
        raise CornerFileError(name, "missing")


def corner_from_dict(raw: Any) -> Corner:
    """Validate a decoded corner file (dict) and return a :class:`Corner`."""
    if not isinstance(raw, Mapping):
        raise CornerFileError("corner", "must be a JSON object")
    _keys(raw, _TOP_KEYS, "")
    name = raw["name"]
    if not isinstance(name, str) or not name.strip():
        raise CornerFileError("name", "must be a non-empty string")
    side = raw["side"]
    if side not in ("left", "right"):
        raise CornerFileError("side", "must be 'left' or 'right'")
    centre = _vec3(raw["wheel_centre"], "wheel_centre")
    spin = _vec3(raw["spin_axis"], "spin_axis")
    if abs(np.linalg.norm(spin) - 1.0) > SPIN_AXIS_UNIT_TOL:
        raise CornerFileError(
            "spin_axis", f"must be a unit vector (|s| = {np.linalg.norm(spin):.9g}, "
            f"tolerance {SPIN_AXIS_UNIT_TOL:g})")
    outboard = 1.0 if side == "left" else -1.0
    if spin[1] * outboard <= 0:
        raise CornerFileError(
            "spin_axis", f"must point outboard ({'+' if outboard > 0 else '-'}y for a {side} corner)")
    patch = _vec3(raw["contact_patch"], "contact_patch")
    links = raw["links"]
    if not isinstance(links, list):
        raise CornerFileError("links", "must be a list of link objects")
    if len(links) != N_LINKS:
        raise CornerFileError("links", f"must hold exactly {N_LINKS} links (got {len(links)})")
    names: list[str] = []
    chassis = np.empty((N_LINKS, 3))
    carrier = np.empty((N_LINKS, 3))
    stiffness = np.empty(N_LINKS)
    play = np.empty(N_LINKS)
    for i, link in enumerate(links):
        where = f"links[{i}]"
        if not isinstance(link, Mapping):
            raise CornerFileError(where, "must be a JSON object")
        _keys(link, _LINK_KEYS, where)
        lname = link["name"]
        if not isinstance(lname, str) or not lname.strip():
            raise CornerFileError(f"{where}.name", "must be a non-empty string")
        if lname in names:
            raise CornerFileError(f"{where}.name", f"duplicate link name {lname!r}")
        names.append(lname)
        chassis[i] = _vec3(link["chassis"], f"{where}.chassis")
        carrier[i] = _vec3(link["carrier"], f"{where}.carrier")
        if np.linalg.norm(carrier[i] - chassis[i]) < MIN_LINK_LENGTH_MM:
            raise CornerFileError(
                f"{where}.carrier",
                f"coincident with chassis point (length below {MIN_LINK_LENGTH_MM:g} mm)")
        stiffness[i], play[i] = _link_values(i, link["stiffness_N_per_mm"], link["play_mm"])
    _check_arrangement(chassis, carrier, centre)
    return Corner(
        name=name, side=side, wheel_centre=_frozen(centre), spin_axis=_frozen(spin),
        contact_patch=_frozen(patch), link_names=tuple(names), chassis=_frozen(chassis),
        carrier=_frozen(carrier), stiffness=_frozen(stiffness), play=_frozen(play))


def _link_values(i: int, stiffness: Any, play: Any) -> tuple[float, float]:
    """Link ``i``'s stiffness (N/mm, positive) and play (mm, not negative), checked."""
    where = f"links[{i}]"
    k = _number(stiffness, f"{where}.stiffness_N_per_mm")
    if k <= 0:
        raise CornerFileError(f"{where}.stiffness_N_per_mm", "must be positive")
    p = _number(play, f"{where}.play_mm")
    if p < 0:
        raise CornerFileError(f"{where}.play_mm", "must not be negative")
    return k, p


def _check_arrangement(chassis: np.ndarray, carrier: np.ndarray, centre: np.ndarray) -> None:
    e = (carrier - chassis) / np.linalg.norm(carrier - chassis, axis=1, keepdims=True)
    for i in range(N_LINKS):
        for j in range(i):
            # same line: parallel directions and carrier of j on line i
            if np.linalg.norm(np.cross(e[i], e[j])) < PARALLEL_TOL:
                off = np.linalg.norm(np.cross(carrier[j] - chassis[i], e[i]))
                if off < MIN_LINK_LENGTH_MM * 1e-3:
                    raise CornerFileError(f"links[{i}]", f"lies on the same line as links[{j}]")
    g = line_matrix(chassis, carrier, centre)
    scale = float(np.sqrt(np.mean(np.sum((carrier - centre) ** 2, axis=1)))) or 1.0
    cond = scaled_condition(g, scale)
    if not np.isfinite(cond) or cond > SINGULAR_COND_MAX:
        raise CornerFileError(
            "links", f"singular arrangement: the five link lines and the wheel-centre height do "
            f"not hold the carrier (condition {cond:.3g} > {SINGULAR_COND_MAX:g})")


def load_corner(source: Mapping | str | Path) -> Corner:
    """Load a corner from a dict, a JSON string or a path (``Path`` or an existing file name).

    A ``str`` that starts with ``{`` is read as JSON text; any other ``str`` as a path.
    """
    if isinstance(source, Mapping):
        return corner_from_dict(source)
    if isinstance(source, str) and source.lstrip().startswith("{"):
        text = source
    elif isinstance(source, str | Path):
        path = Path(source)
        try:
            text = path.read_text(encoding="utf-8")
        except FileNotFoundError:
            raise CornerFileError("geometry", f"file not found: {path}") from None
        except (OSError, UnicodeDecodeError) as exc:
            raise CornerFileError("geometry", f"cannot read {path}: {exc}") from None
    else:
        raise CornerFileError("geometry", "must be a dict, JSON text or a file path")
    try:
        raw = json.loads(text)
    except json.JSONDecodeError as exc:
        raise CornerFileError(
            "geometry", f"not valid JSON (line {exc.lineno}, column {exc.colno}: {exc.msg})"
        ) from None
    return corner_from_dict(raw)


def corner_to_dict(corner: Corner) -> dict:
    """The corner as a dict in the file format of DESIGN.md §4 (round-trips with load)."""
    return {
        "name": corner.name,
        "side": corner.side,
        "wheel_centre": corner.wheel_centre.tolist(),
        "spin_axis": corner.spin_axis.tolist(),
        "contact_patch": corner.contact_patch.tolist(),
        "links": [
            {"name": n, "chassis": corner.chassis[i].tolist(), "carrier": corner.carrier[i].tolist(),
             "stiffness_N_per_mm": float(corner.stiffness[i]), "play_mm": float(corner.play[i])}
            for i, n in enumerate(corner.link_names)
        ],
    }


def mirror_corner(corner: Corner, name: str | None = None) -> Corner:
    """The corner reflected in the vehicle's x–z plane (y → −y), left ⇄ right.

    Toe and camber are unchanged by the reflection. The name swaps the words left/right unless
    ``name`` is given.
    """
    flip = np.array([1.0, -1.0, 1.0])
    if name is None:
        swap = {"left": "right", "right": "left"}
        name = " ".join(swap.get(w, w) for w in corner.name.split(" "))
        if name == corner.name:
            name = f"{corner.name} (mirrored)"
    raw = corner_to_dict(corner)
    raw["name"] = name
    raw["side"] = "right" if corner.side == "left" else "left"
    for key in ("wheel_centre", "spin_axis", "contact_patch"):
        raw[key] = (np.asarray(raw[key]) * flip).tolist()
    for link in raw["links"]:
        link["chassis"] = (np.asarray(link["chassis"]) * flip).tolist()
        link["carrier"] = (np.asarray(link["carrier"]) * flip).tolist()
    return corner_from_dict(raw)


def _per_link(corner: Corner, values: Mapping[str, float] | Sequence[float] | np.ndarray,
              base: np.ndarray, what: str) -> np.ndarray:
    out = base.copy()
    if isinstance(values, Mapping):
        for key, v in values.items():
            out[corner.link_index(key)] = v
    else:
        arr = np.asarray(values, dtype=float)
        if arr.shape != (N_LINKS,):
            raise ValueError(f"{what}: must give {N_LINKS} values or a mapping by link name")
        out = arr.copy()
    return out


def with_links(corner: Corner, *, stiffness: Mapping[str, float] | ArrayLike | None = None,
               play: Mapping[str, float] | ArrayLike | None = None,
               name: str | None = None) -> Corner:
    """A copy of ``corner`` with some links' stiffness (N/mm) and/or play (mm) replaced.

    ``stiffness`` / ``play``: a mapping ``{link name: value}`` (others unchanged) or five values.
    The new values are validated like a file's (finite; stiffness positive, play not negative);
    the geometry is ``corner``'s own, already validated, so it is not checked again.
    """
    if name is not None and (not isinstance(name, str) or not name.strip()):
        raise CornerFileError("name", "must be a non-empty string")
    k = np.array(corner.stiffness, dtype=float) if stiffness is None else \
        _per_link(corner, stiffness, np.asarray(corner.stiffness), "stiffness")
    p = np.array(corner.play, dtype=float) if play is None else \
        _per_link(corner, play, np.asarray(corner.play), "play")
    for i in range(N_LINKS):
        k[i], p[i] = _link_values(i, float(k[i]), float(p[i]))
    return replace(corner, name=corner.name if name is None else name, stiffness=_frozen(k),
                   play=_frozen(p))
