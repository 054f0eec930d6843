"""Fixed vocabularies: corners, axles, the suspension parts catalogue, findings and verdicts.

Verdict words are the project's own. Defect categories follow the public EU roadworthiness
directive 2014/45/EU (minor / major / dangerous).
"""
from __future__ import annotations

from dataclasses import dataclass

CORNERS = [("FL", "front left"), ("FR", "front right"), ("RL", "rear left"), ("RR", "rear right")]
AXLES = [("front", "front"), ("rear", "rear")]
CORNER_AXLE = {"FL": "front", "FR": "front", "RL": "rear", "RR": "rear"}
CORNER_SIDE = {"FL": "left", "FR": "right", "RL": "left", "RR": "right"}


@dataclass(frozen=True)
class Part:
    """One catalogue entry. ``links`` name the links of the axle's corner file the part sits on
    (a wishbone's ball joint is shared by the two links of its arm)."""

    code: str
    label: str
    axle: str  # "front" | "rear"
    kind: str  # "bush" | "ball_joint"
    links: tuple[str, ...]


PARTS: tuple[Part, ...] = (
    Part("front_upper_arm_front_bush", "Upper arm front bush", "front", "bush", ("upper arm front",)),
    Part("front_upper_arm_rear_bush", "Upper arm rear bush", "front", "bush", ("upper arm rear",)),
    Part("front_lower_arm_front_bush", "Lower arm front bush", "front", "bush", ("lower arm front",)),
    Part("front_lower_arm_rear_bush", "Lower arm rear bush", "front", "bush", ("lower arm rear",)),
    Part("front_upper_ball_joint", "Upper ball joint", "front", "ball_joint",
         ("upper arm front", "upper arm rear")),
    Part("front_lower_ball_joint", "Lower ball joint", "front", "ball_joint",
         ("lower arm front", "lower arm rear")),
    Part("front_track_rod_end", "Track rod end", "front", "ball_joint", ("track rod",)),
    Part("rear_upper_front_link_bush", "Upper front link bush", "rear", "bush", ("upper front",)),
    Part("rear_upper_rear_link_bush", "Upper rear link bush", "rear", "bush", ("upper rear",)),
    Part("rear_lower_front_link_bush", "Lower front link bush", "rear", "bush", ("lower front",)),
    Part("rear_spring_link_bush", "Spring link bush", "rear", "bush", ("spring link",)),
    Part("rear_toe_link_inner_bush", "Toe link inner bush", "rear", "bush", ("toe link",)),
    Part("rear_toe_link_outer_joint", "Toe link outer ball joint", "rear", "ball_joint", ("toe link",)),
)
PARTS_BY_CODE = {p.code: p for p in PARTS}
PART_CHOICES = [(p.code, f"{p.axle} · {p.label}") for p in PARTS]

FINDINGS = [
    ("none", "no finding"),
    ("cracking", "cracking"),
    ("debonding", "debonding / separation"),
    ("rubber_displaced", "rubber displaced"),
    ("fluid_leak", "fluid leak"),
    ("dust_cover_damaged", "dust cover damaged"),
]
FINDING_CODES = {code for code, _ in FINDINGS}

# The project's own verdict words, mildest first.
VERDICTS = [
    ("sound", "sound"),
    ("keep_watch", "keep watch"),
    ("worn", "worn – plan replacement"),
    ("unfit", "unfit – replace before use"),
]

DEFECT_CATEGORIES = [
    ("", "none"),
    ("minor", "minor (2014/45/EU)"),
    ("major", "major (2014/45/EU)"),
    ("dangerous", "dangerous (2014/45/EU)"),
]

PLAY_DIRECTIONS = [("axial", "axial"), ("radial", "radial")]
PLAY_LOADING = [("loaded", "loaded"), ("unloaded", "unloaded")]
