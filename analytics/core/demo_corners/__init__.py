"""Invented demo corners (labelled "demo" in their names) for a mid-size car.

Track about 1550 mm, wheel radius 320 mm, x measured from each axle's line. Both files describe
left corners; right corners are their mirror images (y → −y).

- front: double wishbone — lower arm = two links sharing the lower ball joint, upper arm = two
  links sharing the upper ball joint, plus the track rod;
- rear: five-link — two upper links, two lower links (one carries the spring), a toe link behind
  the axle. Designed so the loaded outer rear wheel goes toward toe-in under lateral force when
  new; a soft toe-link bush (stiffness × 0.3) turns it toward toe-out.
"""
from __future__ import annotations

from functools import cache
from pathlib import Path

from ..corner_file import Corner, load_corner, mirror_corner

__all__ = ["demo_corner", "DEMO_CORNER_FILES"]

_HERE = Path(__file__).resolve().parent
DEMO_CORNER_FILES = {
    "front": _HERE / "double_wishbone_front_left.json",
    "rear": _HERE / "five_link_rear_left.json",
}


@cache
def demo_corner(axle: str, side: str) -> Corner:
    """The demo corner of ``axle`` ("front" | "rear") on ``side`` ("left" | "right")."""
    if axle not in DEMO_CORNER_FILES:
        raise ValueError("axle: must be 'front' or 'rear'")
    if side not in ("left", "right"):
        raise ValueError("side: must be 'left' or 'right'")
    left = load_corner(DEMO_CORNER_FILES[axle])
    return left if side == "left" else mirror_corner(left)
