"""The corner file of DESIGN.md §4: validation, round trip, mirror, what-if copies."""
import copy
import json

import numpy as np
import pytest

from analytics.core.corner_file import (
    CornerFileError,
    corner_to_dict,
    load_corner,
    mirror_corner,
    with_links,
)
from analytics.core.demo_corners import DEMO_CORNER_FILES, demo_corner
from analytics.core.wheel_angles import toe_camber_deg


@pytest.fixture
def raw():
    return json.loads(DEMO_CORNER_FILES["rear"].read_text())


def test_demo_corners_load_and_are_labelled_demo():
    for axle in ("front", "rear"):
        for side in ("left", "right"):
            c = demo_corner(axle, side)
            assert "demo" in c.name and side in c.name and c.side == side
            assert c.chassis.shape == (5, 3) and c.carrier.shape == (5, 3)
            assert c.stiffness.shape == (5,) and c.play.shape == (5,)


def test_the_front_demo_is_a_double_wishbone_with_shared_ball_joints():
    c = demo_corner("front", "left")
    assert np.array_equal(c.carrier[0], c.carrier[1])  # lower ball joint
    assert np.array_equal(c.carrier[2], c.carrier[3])  # upper ball joint


def test_demo_corners_have_plausible_track_wheel_size_and_static_angles():
    # mid-size car: track about 1550 mm, wheel radius about 320 mm (common practice, no source)
    for axle in ("front", "rear"):
        c = demo_corner(axle, "left")
        assert 2 * c.wheel_centre[1] == pytest.approx(1550, abs=30)
        assert c.wheel_centre[2] - c.contact_patch[2] == pytest.approx(320, abs=10)
        toe, camber = toe_camber_deg(c.spin_axis)
        assert -0.3 < toe < 0.3 and -2.0 < camber < 0.5


def test_corner_arrays_are_read_only():
    c = demo_corner("rear", "left")
    with pytest.raises(ValueError):
        c.stiffness[0] = 1.0


def test_corner_round_trips_through_dict_and_json_text(raw):
    c = load_corner(raw)
    again = load_corner(json.dumps(corner_to_dict(c)))
    np.testing.assert_array_equal(again.carrier, c.carrier)
    assert again.link_names == c.link_names


def _edit(raw, path, value=None, delete=False):
    out = copy.deepcopy(raw)
    node = out
    for key in path[:-1]:
        node = node[key]
    if delete:
        del node[path[-1]]
    else:
        node[path[-1]] = value
    return out


@pytest.mark.parametrize("path,value,delete,field", [
    (("colour",), "red", False, "colour"),
    (("links", 0, "bush"), 1, False, "links[0].bush"),
    (("side",), None, True, "side"),
    (("links", 3, "play_mm"), None, True, "links[3].play_mm"),
    (("side",), "middle", False, "side"),
    (("wheel_centre",), [1, 2], False, "wheel_centre"),
    (("wheel_centre",), [1, "2", 3], False, "wheel_centre[1]"),
    (("contact_patch",), [0, float("nan"), 0], False, "contact_patch[1]"),
    (("spin_axis",), [0, 0.9, 0], False, "spin_axis"),
    (("spin_axis",), [0, -1.0, 0], False, "spin_axis"),
    (("links", 1, "stiffness_N_per_mm"), 0, False, "links[1].stiffness_N_per_mm"),
    (("links", 1, "stiffness_N_per_mm"), True, False, "links[1].stiffness_N_per_mm"),
    (("links", 4, "play_mm"), -0.1, False, "links[4].play_mm"),
    (("links", 4, "name"), "upper front", False, "links[4].name"),
    (("name",), "", False, "name"),
])
def test_bad_fields_are_refused_naming_the_field(raw, path, value, delete, field):
    with pytest.raises(CornerFileError) as info:
        load_corner(_edit(raw, path, value, delete))
    assert info.value.field == field
    assert str(info.value).startswith(f"{field}: ") and "\n" not in str(info.value)


def test_a_link_whose_points_coincide_is_refused(raw):
    bad = copy.deepcopy(raw)
    bad["links"][2]["carrier"] = list(bad["links"][2]["chassis"])
    with pytest.raises(CornerFileError, match=r"^links\[2\]\.carrier: coincident with chassis point"):
        load_corner(bad)


def test_not_exactly_five_links_is_refused(raw):
    for n in (4, 6):
        bad = copy.deepcopy(raw)
        bad["links"] = (bad["links"] * 2)[:n]
        with pytest.raises(CornerFileError, match=r"^links: must hold exactly 5"):
            load_corner(bad)


def test_a_singular_arrangement_is_refused(raw):
    # all five lines through one point cannot resist a moment about it (statics, common practice)
    bad = copy.deepcopy(raw)
    for link in bad["links"]:
        link["carrier"] = [0.0, 720.0, 300.0]
    with pytest.raises(CornerFileError, match=r"^links: singular arrangement"):
        load_corner(bad)


def test_files_and_text_that_are_not_corners_are_refused(tmp_path):
    with pytest.raises(CornerFileError, match=r"^geometry: file not found"):
        load_corner(tmp_path / "none.json")
    bad = tmp_path / "bad.json"
    bad.write_text("{not json")
    with pytest.raises(CornerFileError, match=r"^geometry: not valid JSON"):
        load_corner(bad)
    listed = tmp_path / "list.json"
    listed.write_text("[]")
    with pytest.raises(CornerFileError, match=r"^corner: must be a JSON object"):
        load_corner(listed)


def test_mirror_flips_y_and_keeps_static_toe_and_camber():
    left = demo_corner("rear", "left")
    right = mirror_corner(left)
    assert right.side == "right" and "right" in right.name
    np.testing.assert_allclose(right.chassis[:, 1], -left.chassis[:, 1])
    np.testing.assert_allclose(toe_camber_deg(right.spin_axis), toe_camber_deg(left.spin_axis))
    np.testing.assert_allclose(mirror_corner(right).carrier, left.carrier)


def test_with_links_changes_only_the_named_links():
    c = demo_corner("rear", "left")
    soft = with_links(c, stiffness={"toe link": 1000.0}, play=[0.1] * 5)
    assert soft.stiffness[4] == 1000.0
    np.testing.assert_array_equal(soft.stiffness[:4], c.stiffness[:4])
    np.testing.assert_array_equal(soft.play, [0.1] * 5)
    with pytest.raises(ValueError, match="no link named"):
        with_links(c, stiffness={"nothing": 1.0})
    with pytest.raises(CornerFileError, match="stiffness_N_per_mm: must be positive"):
        with_links(c, stiffness={"toe link": -1.0})
