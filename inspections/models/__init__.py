"""Records a workshop keeps. Split by subject; every model is re-exported here.

Units (DESIGN.md §3): lengths mm, forces N, angles degrees, odometer km, times stored in UTC.
Axes are ISO 8855 (x forward, y left, z up). Toe positive = toe-in; camber positive = top of the
wheel leans outboard; caster positive = top of the steering axis leans rearward.
"""
from .audit import AuditEntry
from .catalogue import (
    AXLES,
    CORNERS,
    DEFECT_CATEGORIES,
    FINDINGS,
    PARTS,
    PARTS_BY_CODE,
    VERDICTS,
    Part,
)
from .org import Fleet, Profile, Role, Workshop
from .platform import AlignmentSpec, ComponentLimit, Platform, PlatformCorner
from .records import (
    AlignmentSession,
    ComponentCheck,
    ComponentPhoto,
    ServiceEvent,
    WheelReading,
)
from .vehicle import Vehicle, normalise_identifier

__all__ = [
    "AXLES",
    "CORNERS",
    "DEFECT_CATEGORIES",
    "FINDINGS",
    "PARTS",
    "PARTS_BY_CODE",
    "VERDICTS",
    "AlignmentSession",
    "AlignmentSpec",
    "AuditEntry",
    "ComponentCheck",
    "ComponentLimit",
    "ComponentPhoto",
    "Fleet",
    "Part",
    "Platform",
    "PlatformCorner",
    "Profile",
    "Role",
    "ServiceEvent",
    "Vehicle",
    "WheelReading",
    "Workshop",
    "normalise_identifier",
]
