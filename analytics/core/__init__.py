# --- corner engine (issue 3): units, corner file, kinematics, compliance, load cases, condition
from .compliance import (
    ComplianceResult,
    StabilityVerdict,
    compliance_matrix,
    load_response,
    play_bands,
    play_sensitivity,
    stability_verdict,
)
from .condition import (
    FINDING_STIFFNESS_FACTORS,
    LinkCondition,
    WhatIf,
    measured_corner,
    play_from_ball_joint,
    stiffness_factor,
    stiffness_from_deflection,
    what_if,
)
from .corner_file import (
    Corner,
    CornerFileError,
    corner_from_dict,
    corner_to_dict,
    load_corner,
    mirror_corner,
    with_links,
)
from .demo_corners import demo_corner
from .kinematics import KinematicsError, SweepResult, sweep
from .load_cases import (
    LoadCase,
    Platform,
    axle_load_N_from_kg,
    braking,
    braking_in_turn,
    cornering,
    lift_off,
    vehicle_load_cases,
)
from .units import (
    cross_camber,
    cross_caster,
    deg_to_dm,
    dm_to_deg,
    format_angle,
    km_from_miles,
    linear_from_toe,
    miles_from_km,
    parse_angle,
    thrust_angle,
    toe_from_linear,
    total_toe,
)

# other modules: extend with `__all__ += [...]`
__all__ = [
    "ComplianceResult", "StabilityVerdict", "compliance_matrix", "load_response", "play_bands",
    "play_sensitivity", "stability_verdict",
    "FINDING_STIFFNESS_FACTORS", "LinkCondition", "WhatIf", "measured_corner",
    "play_from_ball_joint", "stiffness_factor", "stiffness_from_deflection", "what_if",
    "Corner", "CornerFileError", "corner_from_dict", "corner_to_dict", "load_corner",
    "mirror_corner", "with_links", "demo_corner",
    "KinematicsError", "SweepResult", "sweep",
    "LoadCase", "Platform", "axle_load_N_from_kg", "braking", "braking_in_turn", "cornering",
    "lift_off", "vehicle_load_cases",
    "cross_camber", "cross_caster", "deg_to_dm", "dm_to_deg", "format_angle", "km_from_miles",
    "linear_from_toe", "miles_from_km", "parse_angle", "thrust_angle", "toe_from_linear",
    "total_toe",
]

# --- drift, wear, fleet life and advice (issue 4)
from . import advice as _advice  # noqa: E402
from . import cusum as _cusum  # noqa: E402
from . import drift as _drift  # noqa: E402
from . import life as _life  # noqa: E402
from . import wear as _wear  # noqa: E402
from .advice import *  # noqa: E402, F403
from .cusum import *  # noqa: E402, F403
from .drift import *  # noqa: E402, F403
from .life import *  # noqa: E402, F403
from .wear import *  # noqa: E402, F403

__all__ += [*_cusum.__all__, *_drift.__all__, *_wear.__all__, *_life.__all__, *_advice.__all__]
