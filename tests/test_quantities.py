"""Tests of wetmap.quantities: repair outlines, whole boards, sections, units and the bill.

Shapes here are hand-checkable rectangles and circles on a plan in metres; each check
names where its expected value comes from.
"""

from __future__ import annotations

import math
from decimal import Decimal

import numpy as np
import pytest
import shapely
from hypothesis import given, settings
from hypothesis import strategies as st
from shapely import affinity
from shapely.geometry import Point, box

from wetmap.errors import SurveyError
from wetmap.quantities import (
    FT2_PER_SQUARE,
    M2_PER_FT2,
    M2_PER_SQUARE,
    M_PER_FT,
    OUTSIDE_SECTIONS,
    QUAD_SEGS,
    bill_of_quantities,
    board_takeoff,
    compute_quantities,
    convert_area,
    dominant_angle_deg,
    overlap_areas,
    repair_outline,
)
from wetmap.survey import Prices, Repair, load_survey
from wetmap.vectors import Section

BIG = box(-100, -100, 100, 100)


def corner_area(m: float) -> float:
    """Area of the rounded corners of a buffer by ``m``: the inscribed polygon shapely draws.

    A full circle drawn with 4 * QUAD_SEGS chords has area (N / 2) m^2 sin(2 pi / N)
    (elementary geometry: N isosceles triangles); it tends to pi m^2.
    """
    n = 4 * QUAD_SEGS
    return 0.5 * n * m * m * math.sin(2 * math.pi / n)


# --------------------------------------------------------------------------------------
# Units
# --------------------------------------------------------------------------------------


def test_foot_and_square_are_exact():
    # International foot: 1 ft = 0.3048 m exactly (International Yard and Pound Agreement,
    # 1959; NIST SP 811 appendix B: 1 ft2 = 9.290304 E-02 m2, exact).
    assert M_PER_FT == 0.3048
    assert Decimal(repr(M2_PER_FT2)) == Decimal("0.09290304")
    # A roofing square is 100 ft2 (common practice in the trade) = 9.290304 m2.
    assert FT2_PER_SQUARE == 100
    assert M2_PER_SQUARE == pytest.approx(9.290304, abs=1e-12)


def test_convert_area():
    # NIST SP 811 appendix B: 1 m2 = 10.76391 ft2 (the reciprocal of 0.09290304).
    assert convert_area(1.0, "ft2") == pytest.approx(10.763910417, rel=1e-10)
    assert convert_area(M2_PER_FT2, "ft2") == pytest.approx(1.0, rel=1e-15)
    assert convert_area(100.0, "m2") == 100.0
    # 100 ft2 = 1 square (common practice), so 9.290304 m2 = 1 square.
    assert convert_area(9.290304, "squares") == pytest.approx(1.0, rel=1e-12)
    # 4 x 8 ft board (common practice) = 32 ft2 = 2.97289728 m2
    assert convert_area((4 * M_PER_FT) * (8 * M_PER_FT), "ft2") == pytest.approx(32.0, rel=1e-12)
    with pytest.raises(ValueError):
        convert_area(1.0, "acres")  # type: ignore[arg-type]


# --------------------------------------------------------------------------------------
# Repair outline: margin, merge, clip, exclusions
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize("a, m", [(2.0, 0.3), (1.0, 0.6), (5.0, 1.0)])
def test_margin_of_a_square(a, m):
    """A square of side a grown by m: a^2 + 4 a m + pi m^2 (Steiner's formula for the
    parallel set of a convex body: A + P m + pi m^2)."""
    r = repair_outline([box(0, 0, a, a)], margin_m=m, outline=BIG)
    assert r.area == pytest.approx(a * a + 4 * a * m + corner_area(m), rel=1e-12)
    # the drawn corners fall short of pi m^2 by under 1.2 % of the corner area (QUAD_SEGS = 6,
    # the fewest segments whose chords stay within 1 % of the margin; 0.2 % with the 16 used before)
    assert r.area == pytest.approx(a * a + 4 * a * m + math.pi * m * m, abs=0.012 * math.pi * m * m)
    # and the same shape as shapely's own buffer
    assert r.symmetric_difference(box(0, 0, a, a).buffer(m, quad_segs=QUAD_SEGS)).area < 1e-9


def test_margin_of_a_rectangle_and_a_circle():
    # Steiner's formula: rectangle a x b -> a b + 2 (a + b) m + pi m^2
    r = repair_outline([box(0, 0, 3, 1)], margin_m=0.5, outline=BIG)
    assert r.area == pytest.approx(3 + 2 * 4 * 0.5 + corner_area(0.5), rel=1e-12)
    # a disc of radius R grown by m is a disc of radius R + m: pi (R + m)^2
    disc = Point(0, 0).buffer(2.0, quad_segs=256)
    r = repair_outline([disc], margin_m=0.5, outline=BIG)
    assert r.area == pytest.approx(math.pi * 2.5**2, rel=1e-3)


def test_zero_margin_and_nothing_wet():
    assert repair_outline([box(0, 0, 2, 2)], margin_m=0.0, outline=BIG).area == pytest.approx(4.0)
    assert repair_outline([], margin_m=0.3, outline=BIG).is_empty


def test_overlapping_margins_merge():
    # two 2 x 2 squares 0.4 m apart: 0.3 m margins overlap (0.6 > 0.4) -> one outline
    r = repair_outline([box(0, 0, 2, 2), box(2.4, 0, 4.4, 2)], margin_m=0.3, outline=BIG)
    assert r.geom_type == "Polygon"
    one = 4 + 4 * 2 * 0.3 + corner_area(0.3)
    # the merged outline is the union: both grown squares less their shared strip
    # (0.2 m wide, 2 m tall, plus the rounded ends) - at least the 0.2 x 2 rectangle
    assert r.area < 2 * one - 0.2 * 2
    # 1.0 m apart: they stay two outlines
    r = repair_outline([box(0, 0, 2, 2), box(3, 0, 5, 2)], margin_m=0.3, outline=BIG)
    assert r.geom_type == "MultiPolygon" and len(r.geoms) == 2
    assert r.area == pytest.approx(2 * one, rel=1e-12)


def test_clipped_to_the_outline():
    """A 2 x 2 anomaly against the roof edge x = 0, margin 0.5: the part beyond the edge
    (a 0.5 x 2 strip and two quarter circles: half the corners) is cut off (by hand)."""
    m = 0.5
    r = repair_outline([box(0, 2, 2, 4)], margin_m=m, outline=box(0, 0, 10, 10))
    grown = 4 + 4 * 2 * m + corner_area(m)
    assert r.area == pytest.approx(grown - 2 * m - corner_area(m) / 2, rel=1e-9)
    assert r.bounds[0] == pytest.approx(0.0)


def test_exclusions_are_cut_out():
    # a 1 x 1 skylight fully inside the grown region leaves a hole of exactly its area
    r = repair_outline([box(2, 2, 6, 6)], margin_m=0.3, outline=BIG, exclusions=box(3, 3, 4, 4))
    assert r.area == pytest.approx(16 + 4 * 4 * 0.3 + corner_area(0.3) - 1.0, rel=1e-12)
    assert len(r.interiors) == 1
    # an exclusion that overlaps the margin only removes its overlap (0.3 x 1)
    r = repair_outline([box(2, 2, 6, 6)], margin_m=0.3, outline=BIG, exclusions=box(6, 3, 7, 4))
    assert r.area == pytest.approx(16 + 4 * 4 * 0.3 + corner_area(0.3) - 0.3, rel=1e-12)
    assert r.is_valid and r.geom_type == "Polygon"


# --------------------------------------------------------------------------------------
# Whole boards (counts by hand)
# --------------------------------------------------------------------------------------

ROOF = box(0, 0, 12, 12)


def test_grid_direction_follows_the_outline():
    assert dominant_angle_deg(ROOF) == 0.0
    assert dominant_angle_deg(affinity.rotate(box(0, 0, 40, 20), 30, origin=(0, 0))) == pytest.approx(30.0)
    # an L-shaped roof rotated by 12 degrees: all its edges vote 12
    ell = box(0, 0, 30, 10).union(box(0, 0, 10, 25))
    assert dominant_angle_deg(affinity.rotate(ell, 12, origin=(3, 4))) == pytest.approx(12.0)


@pytest.mark.parametrize("angle", [0.0, 30.0, 67.5])
def test_rectangle_on_the_board_grid(angle):
    """1.2 x 2.4 m boards from the roof's corner; the roof and repair rotated together."""
    rot = lambda g: affinity.rotate(g, angle, origin=(0, 0))  # noqa: E731
    roof = rot(ROOF)
    # exactly two boards by two: boards beyond only touch it -> 4 boards (by hand)
    t = board_takeoff(rot(box(1.2, 2.4, 3.6, 7.2)), board_m=(1.2, 2.4), roof=roof)
    assert t.angle_deg == pytest.approx(angle)
    assert t.count == 4
    assert t.board_area_m2 == pytest.approx(4 * 2.88)
    assert t.tearoff_area_m2 == pytest.approx(4 * 2.88)
    # x 1.0-3.7 spans board columns 0..3 (4), y 2.0-7.3 spans rows 0..3 (4): 16 boards
    t = board_takeoff(rot(box(1.0, 2.0, 3.7, 7.3)), board_m=(1.2, 2.4), roof=roof)
    assert t.count == 16
    union = shapely.union_all(np.asarray(t.boards, dtype=object))
    assert union.area == pytest.approx(16 * 2.88)
    assert union.symmetric_difference(rot(box(0, 0, 4.8, 9.6))).area < 1e-9


def test_rectangle_rotated_against_the_grid():
    """A square of side 1 turned 45 degrees (a diamond, half-diagonal 0.707 m) centred on a
    grid node of 1.2 x 2.4 m boards overlaps the four boards meeting there (by hand)."""
    diamond = affinity.rotate(box(-0.5, -0.5, 0.5, 0.5), 45).buffer(0)
    diamond = affinity.translate(diamond, 2.4, 4.8)
    t = board_takeoff(diamond, board_m=(1.2, 2.4), roof=ROOF, angle_deg=0.0)
    assert t.count == 4
    # moved to the centre of a board (3.0, 6.0) it is 1.414 m wide, wider than the 1.2 m
    # board, and spills across both long edges -> three boards in a row along x
    t = board_takeoff(affinity.translate(diamond, 0.6, 1.2), board_m=(1.2, 2.4), roof=ROOF, angle_deg=0.0)
    assert t.count == 3


@pytest.mark.parametrize("radius, expected", [(1.5, 16), (1.4, 12), (0.9, 4)])
def test_circle_on_square_boards(radius, expected):
    """A disc centred on a node of 1 x 1 m boards overlaps a board when the board's nearest
    point is closer than the radius (by hand): the 4 boards at the node (distance 0), the
    8 edge neighbours (1 m) and the 4 diagonal ones (sqrt 2 = 1.414 m)."""
    disc = Point(5, 5).buffer(radius, quad_segs=64)
    t = board_takeoff(disc, board_m=(1.0, 1.0), roof=ROOF, angle_deg=0.0, origin_xy=(0.0, 0.0))
    assert t.count == expected
    # against a slow, obviously-correct reference: distance from the centre to each cell
    n = 0
    for i in range(12):
        for j in range(12):
            dx = max(i - 5, 0, 5 - (i + 1))
            dy = max(j - 5, 0, 5 - (j + 1))
            n += math.hypot(dx, dy) < radius
    assert t.count == n


def test_grid_origin_and_angle_override():
    # origin (0, 0): a 1 x 1 patch at (0.1, 0.1) lies in one board
    patch = box(0.1, 0.1, 1.1, 1.1)
    assert board_takeoff(patch, board_m=(1.2, 2.4), roof=ROOF, origin_xy=(0.0, 0.0)).count == 1
    # grid moved to (0.6, 0.6): the patch straddles a joint each way -> 2 x 2 boards
    t = board_takeoff(patch, board_m=(1.2, 2.4), roof=ROOF, origin_xy=(0.6, 0.6))
    assert t.count == 4 and t.origin_xy == (0.6, 0.6)
    # a 2 x 0.5 strip at angle 0 fits in 2 boards along x; turned 90 degrees the 2.4 m
    # side runs along x and one board holds it (by hand)
    strip = box(0.1, 0.1, 2.1, 0.6)
    assert board_takeoff(strip, board_m=(1.2, 2.4), roof=ROOF, angle_deg=0.0).count == 2
    assert board_takeoff(strip, board_m=(1.2, 2.4), roof=ROOF, angle_deg=90.0, origin_xy=(0.0, 0.0)).count == 1


def test_tearoff_is_clipped_to_the_roof():
    # roof edge at x = 12 cuts the last board column: a 1.0 m grid from x = 0.5 puts a
    # board over 11.5-12.5, half of it off the roof
    roof = box(0, 0, 12, 12)
    t = board_takeoff(box(11.0, 1.0, 12.0, 1.5), board_m=(1.0, 1.0), roof=roof, angle_deg=0.0,
                      origin_xy=(0.5, 0.0))
    assert t.count == 2                      # 10.5-11.5 and 11.5-12.5
    assert t.board_area_m2 == pytest.approx(2.0)
    assert t.tearoff_area_m2 == pytest.approx(1.5)
    assert sorted(t.tearoff_m2) == pytest.approx([0.5, 1.0])


@settings(max_examples=40, deadline=None)
@given(
    x=st.floats(1, 8), y=st.floats(1, 8), w=st.floats(0.05, 3), h=st.floats(0.05, 3),
    turn=st.floats(0, 90), angle=st.floats(-45, 45),
)
def test_boards_cover_the_repair(x, y, w, h, turn, angle):
    """Property: the boards cover the repair outline, each overlaps it, and none repeats."""
    repair = affinity.rotate(box(x, y, x + w, y + h), turn)
    t = board_takeoff(repair, board_m=(1.2, 2.4), roof=BIG, angle_deg=angle)
    boards = np.asarray(t.boards, dtype=object)
    union = shapely.union_all(boards)
    # a board overlapping by less than 1 mm2 (quantities._TOUCH_M2) is a touch and is not
    # counted; a corner of the outline can touch up to four boards that way
    assert repair.difference(union).area < 4e-6
    assert (shapely.area(shapely.intersection(boards, repair)) > 0).all()
    assert union.area == pytest.approx(t.count * 2.88, rel=1e-9)


# --------------------------------------------------------------------------------------
# Sections and the replace flag
# --------------------------------------------------------------------------------------


def _two_sections():
    """A 20 x 10 roof, sections W (x 0-8) and E (x 10-20); x 8-10 is in no section."""
    return box(0, 0, 20, 10), [Section("W", box(0, 0, 8, 10), "BUR", "perlite"),
                               Section("E", box(10, 0, 20, 10), "BUR", "wood fibre")]


def test_sections_add_up_to_the_totals():
    outline, sections = _two_sections()
    anomalies = [box(6, 2, 9, 4), box(12, 6, 14, 8), box(15, 1, 16, 2), box(9.2, 8, 9.8, 9.5)]
    status = ["wet", "unverified", "dry", "wet"]
    q = compute_quantities(anomalies, status, outline=outline, exclusions=box(17, 7, 18, 8), sections=sections,
                           settings=Repair(margin_m=0.3, board_m=(1.2, 2.4)))
    parts = [*q.sections, q.outside]
    assert q.outside.name == OUTSIDE_SECTIONS
    roof = outline.difference(box(17, 7, 18, 8))
    assert sum(p.area_m2 for p in parts) == pytest.approx(roof.area, abs=1e-9)
    assert sum(p.repair_area_m2 for p in parts) == pytest.approx(q.repair.area, abs=1e-9)
    assert sum(p.boards for p in parts) == q.takeoff.count          # exactly: each board once
    assert sum(p.tearoff_area_m2 for p in parts) == pytest.approx(q.takeoff.tearoff_area_m2, abs=1e-9)
    assert sum(p.board_area_m2 for p in parts) == pytest.approx(q.takeoff.board_area_m2, abs=1e-9)
    for key, kinds in (("confirmed_wet_area_m2", {"wet"}), ("unverified_area_m2", {"unverified"}),
                       ("confirmed_dry_area_m2", {"dry"})):
        expected = sum(a.area for a, s in zip(anomalies, status) if s in kinds)
        assert sum(getattr(p, key) for p in parts) == pytest.approx(expected, abs=1e-9)
    # by hand: the first anomaly (x 6-9) puts 2 x 2 = 4 m2 in W and 1 x 2 = 2 m2 outside
    w = q.sections[0]
    assert w.confirmed_wet_area_m2 == pytest.approx(4.0)
    assert q.outside.confirmed_wet_area_m2 == pytest.approx(2.0 + 0.6 * 1.5)
    assert w.wet_fraction == pytest.approx(4.0 / 80.0)
    assert len(q.board_section) == q.takeoff.count
    assert set(q.board_section) <= {-1, 0, 1}


def test_each_board_goes_to_its_largest_share():
    # 1 x 1 boards from x = 0: a board over x 7.5-8.5 if origin 0.5... use origin (0.4, 0):
    # board 7.4-8.4 has 0.6 m2 in W and 0.4 m2 in no section -> W
    outline, sections = _two_sections()
    q = compute_quantities([box(7.6, 5.1, 8.2, 5.9)], ["wet"], outline=outline, sections=sections,
                           settings=Repair(margin_m=0.0, board_m=(1.0, 1.0), board_origin=(0.4, 0.0),
                                           board_angle_deg=0.0))
    assert q.takeoff.count == 1
    assert q.board_section == (0,)
    assert q.sections[0].boards == 1 and q.outside.boards == 0
    # origin (0.2, 0): board 7.2-8.2 -> 0.8 in W; board 8.2-9.2 -> all outside
    q = compute_quantities([box(7.6, 5.1, 8.4, 5.9)], ["wet"], outline=outline, sections=sections,
                           settings=Repair(margin_m=0.0, board_m=(1.0, 1.0), board_origin=(0.2, 0.0),
                                           board_angle_deg=0.0))
    assert q.board_section == (0, -1)
    assert q.outside.boards == 1
    assert q.outside.tearoff_area_m2 == pytest.approx(1.0)


def test_replace_flag_and_warning():
    outline, sections = _two_sections()
    # 30 m2 wet in W's 80 m2 = 37.5 % > 25 % (default: some local building codes; common practice)
    q = compute_quantities([box(0, 0, 3, 10)], ["wet"], outline=outline, sections=sections,
                           settings=Repair())
    assert q.sections[0].replace_flag and not q.sections[1].replace_flag
    assert len(q.notes) == 1 and "section W" in q.notes[0] and "25 %" in q.notes[0]
    assert "local code decides" in q.notes[0]
    q = compute_quantities([box(0, 0, 3, 10)], ["wet"], outline=outline, sections=sections,
                           settings=Repair(replace_above_pct=40.0))
    assert not q.sections[0].replace_flag and not q.notes
    # no sections: the whole roof (30 / 200 = 15 %) against 10 %
    q = compute_quantities([box(0, 0, 3, 10)], ["wet"], outline=outline, settings=Repair(replace_above_pct=10.0))
    assert q.replace_flag and q.wet_fraction == pytest.approx(0.15)
    assert q.notes and q.notes[0].startswith("the whole roof")
    # "above" is strict: exactly at the threshold is not flagged
    q = compute_quantities([box(0, 0, 3, 10)], ["wet"], outline=outline, settings=Repair(replace_above_pct=15.0))
    assert not q.replace_flag


def test_overlapping_sections_are_reported():
    outline = box(0, 0, 20, 10)
    sections = [Section("A", box(0, 0, 11, 10)), Section("B", box(10, 0, 20, 10))]
    q = compute_quantities([], [], outline=outline, sections=sections, settings=Repair())
    assert any("overlap by 10.00 m2" in n for n in q.notes)


def test_unverified_left_out_when_asked():
    a = [box(1, 1, 3, 3), box(6, 6, 8, 8)]
    q = compute_quantities(a, ["wet", "unverified"], outline=BIG, settings=Repair(margin_m=0.0, board_m=None))
    assert q.repair.area == pytest.approx(8.0)
    q = compute_quantities(a, ["wet", "unverified"], outline=BIG,
                           settings=Repair(margin_m=0.0, board_m=None, include_unverified=False))
    assert q.repair.area == pytest.approx(4.0)
    assert q.takeoff.count == 0 and q.bill.area_basis.startswith("repair area")


# --------------------------------------------------------------------------------------
# Bill of quantities (arithmetic by hand)
# --------------------------------------------------------------------------------------

RATES = Prices(currency="EUR", tearoff_rate=12.50, replace_rate=31.75, board_each=18.40,
               cut_edge_per_m=4.20, mobilisation=350.0)


def test_priced_bill_by_hand():
    b = bill_of_quantities(tearoff_area_m2=184.32, cut_edge_m=74.6146, boards=64, prices=RATES)
    lines = {line.item: line for line in b.lines}
    assert [line.item for line in b.lines] == ["tear-off", "replace", "boards", "cut edge", "mobilisation"]
    # by hand: 184.32 x 12.50 = 2304.00; 184.32 x 31.75 = 5852.16; 64 x 18.40 = 1177.60;
    # 74.61 m (rounded first) x 4.20 = 313.362 -> 313.36; mobilisation 350.00
    assert lines["tear-off"].amount == 2304.00
    assert lines["replace"].amount == 5852.16
    assert lines["boards"].amount == 1177.60
    assert lines["cut edge"].quantity == 74.61 and lines["cut edge"].amount == 313.36
    assert lines["mobilisation"].quantity == 1 and lines["mobilisation"].amount == 350.00
    # 2304.00 + 5852.16 + 1177.60 + 313.36 + 350.00 = 9997.12
    assert b.total == 9997.12
    assert b.currency == "EUR"
    d = b.as_dict()
    assert d["lines"][2]["quantity"] == 64 and isinstance(d["lines"][2]["quantity"], int)


def test_rates_per_square_and_per_ft2():
    prices = Prices(currency="USD", tearoff_rate=95.0, tearoff_unit="squares", replace_rate=2.10,
                    replace_unit="ft2")
    b = bill_of_quantities(tearoff_area_m2=184.32, cut_edge_m=10.0, prices=prices,
                           area_units=("m2", "ft2", "squares"))
    tear, repl = b.lines[0], b.lines[1]
    # 184.32 m2 / 9.290304 = 19.84003 squares -> 19.84 x 95.00 = 1884.80 (by hand)
    assert tear.unit == "squares" and tear.quantity == 19.84 and tear.amount == 1884.80
    # 184.32 m2 / 0.09290304 = 1984.003 ft2 -> 1984.00 x 2.10 = 4166.40 (by hand)
    assert repl.unit == "ft2" and repl.quantity == 1984.00 and repl.amount == 4166.40
    assert dict(tear.areas) == {"m2": 184.32, "ft2": 1984.0, "squares": 19.84}
    # unpriced lines (cut edge) stay out of the total
    assert b.lines[-1].item == "cut edge" and b.lines[-1].amount is None
    assert b.total == 6051.20  # 1884.80 + 4166.40


def test_amounts_round_half_up():
    # 0.25 m2 x 10.70 = 2.675: half up gives 2.68 (float rounding would give 2.67); by hand
    b = bill_of_quantities(tearoff_area_m2=0.25, cut_edge_m=0.0,
                           prices=Prices(currency="EUR", tearoff_rate=10.70))
    assert b.lines[0].amount == 2.68


def test_unpriced_bill():
    b = bill_of_quantities(tearoff_area_m2=10.0, cut_edge_m=13.0, boards=None)
    assert b.currency is None and b.total is None
    assert [line.item for line in b.lines] == ["tear-off", "replace", "cut edge"]
    assert all(line.rate is None and line.amount is None for line in b.lines)


# --------------------------------------------------------------------------------------
# survey.toml keys of the quantities
# --------------------------------------------------------------------------------------

#: A minimal valid survey.toml (load_survey only checks that the files it names exist).
SURVEY_TOML = """\
[survey]
title = "Test roof"
kind = "roof"
crs = "local"

[conditions]
air_c = 6.0
humidity_pct = 65
sky = "clear"

[camera]
emissivity = 0.94

[plan]
outline = "plan/outline.geojson"

[[mosaic]]
path = "thermal/pass1.tif"
units = "C"
"""


@pytest.fixture
def survey_with(tmp_path):
    """``survey_with(extra)`` -> a folder whose survey.toml is SURVEY_TOML plus ``extra``
    (the plan and mosaic files it names exist, empty)."""
    count = [0]

    def make(extra: str = ""):
        count[0] += 1
        folder = tmp_path / f"s{count[0]}"
        for name in ("plan/outline.geojson", "thermal/pass1.tif"):
            (folder / name).parent.mkdir(parents=True, exist_ok=True)
            (folder / name).touch()
        (folder / "survey.toml").write_text(SURVEY_TOML + extra, encoding="utf-8")
        return folder

    return make


def test_repair_and_prices_keys_are_read(survey_with):
    folder = survey_with("""
[repair]
board_angle_deg = 15.0
board_origin = [10.0, 20.0]
replace_above_pct = 30
area_units = ["squares", "ft2"]

[prices]
currency = "GBP"
tearoff_per_square = 80
replace_per_m2 = 30.5
board_each = 12
cut_edge_per_m = 3
mobilisation = 400
""")
    s = load_survey(folder)
    r = s.repair
    assert r.board_angle_deg == 15.0 and r.board_origin == (10.0, 20.0)
    assert r.replace_above_pct == 30.0
    assert r.area_units == ("m2", "ft2", "squares")
    p = s.prices
    assert p == Prices(currency="GBP", tearoff_rate=80.0, tearoff_unit="squares", replace_rate=30.5,
                       replace_unit="m2", board_each=12.0, cut_edge_per_m=3.0, mobilisation=400.0)


def test_defaults_without_the_new_keys(survey_with):
    s = load_survey(survey_with())
    assert s.prices is None
    assert s.repair.replace_above_pct == 25.0 and s.repair.area_units == ("m2",)
    assert s.repair.board_angle_deg is None and s.repair.board_origin is None


@pytest.mark.parametrize("extra, words", [
    ('[repair]\narea_units = ["m2", "sqft"]\n', ['area_units', '"sqft"', "ft2"]),
    ('[repair]\narea_units = "ft2"\n', ["area_units", "expected a list"]),
    ('[repair]\nreplace_above_pct = 0\n', ["replace_above_pct", "= 0"]),
    ('[repair]\nboard_origin = [1.0]\n', ["board_origin", "list of 2 numbers"]),
    ('[prices]\ntearoff_per_m2 = 10\n', ["[prices] currency", "is missing"]),
    ('[prices]\ncurrency = "EUR"\ntearoff_per_m2 = 10\ntearoff_per_square = 90\n',
     ["tearoff_per_square", "tearoff_per_m2", "once"]),
    ('[prices]\ncurrency = "EUR"\nboard_each = -1\n', ["board_each", "= -1", ">= 0"]),
    ('[prices]\ncurrency = "EUR"\nper_board = 3\n', ["[prices] per_board", "unknown key"]),
])
def test_bad_quantity_keys(survey_with, extra, words):
    folder = survey_with("\n" + extra)
    with pytest.raises(SurveyError) as err:
        load_survey(folder)
    text = "\n".join(err.value.problems)
    assert "survey.toml" in text
    for w in words:
        assert w in text, text


# --------------------------------------------------------------------------------------
# overlap_areas: the fast clip of many boards, against shapely's direct intersection
# (reference: shapely.area(shapely.intersection(cells, geom)), a general-purpose library)
# --------------------------------------------------------------------------------------


@settings(max_examples=30, deadline=None)
@given(seed=st.integers(0, 2**32 - 1), angle=st.floats(0.0, 89.0))
def test_overlap_areas_equals_direct_intersection(seed, angle):
    rng = np.random.default_rng(seed)
    # a roof with holes (exclusions) and several separate wet patches grown by a margin
    roof = box(0, 0, 40, 30).difference(shapely.union_all(shapely.buffer(
        shapely.points(rng.uniform(2, 38, 4), rng.uniform(2, 28, 4)), rng.uniform(0.5, 2.0, 4))))
    patches = shapely.union_all(shapely.buffer(shapely.points(rng.uniform(0, 40, 6), rng.uniform(0, 30, 6)),
                                               rng.uniform(0.5, 5.0, 6), quad_segs=16))
    patches = affinity.rotate(patches, angle, origin=(20, 15))
    x0, y0 = (a.ravel() for a in np.meshgrid(np.arange(-2.0, 42.0, 1.2), np.arange(-2.0, 32.0, 1.25)))
    cells = shapely.box(x0, y0, x0 + 1.2, y0 + 1.25)  # a board grid over the whole roof and beyond
    for geom in (roof, patches):
        direct = shapely.area(shapely.intersection(cells, geom))
        np.testing.assert_allclose(overlap_areas(cells, geom), direct, rtol=0, atol=1e-9)


def test_overlap_areas_empty_inputs():
    cells = shapely.box([0.0], [0.0], [1.0], [1.0])
    assert overlap_areas(cells, shapely.Polygon()).tolist() == [0.0]
    assert overlap_areas(np.asarray([], dtype=object), box(0, 0, 1, 1)).shape == (0,)


# ------------------------------------------------------- board grid origin unknown


def _count_by_hand(repair, w: float, h: float, ox: float, oy: float) -> int:
    """Boards of the axis-aligned grid with corner (ox, oy) that ``repair`` overlaps by more
    than a touch: every cell tested one by one with shapely (slow, obviously right)."""
    x0, y0, x1, y1 = repair.bounds
    n = 0
    for i in range(math.floor((x0 - ox) / w) - 1, math.ceil((x1 - ox) / w) + 1):
        for j in range(math.floor((y0 - oy) / h) - 1, math.ceil((y1 - oy) / h) + 1):
            cell = box(ox + i * w, oy + j * h, ox + (i + 1) * w, oy + (j + 1) * h)
            n += cell.intersection(repair).area > 1e-6
    return n


def test_board_count_over_origins_is_the_median_with_its_range():
    # A 3.0 x 3.0 m repair on 1.2 x 2.4 m boards: the count depends on where the joints
    # lie. Without a given joint the grid is tried at 7 x 7 offsets across one board; the
    # reported count is the median (common practice: state the range, price the typical
    # case), the range the fewest and most. Each count is checked against a cell-by-cell
    # count done here.
    from wetmap.quantities import ORIGIN_STEPS, board_takeoff_over_origins

    roof = box(0.0, 0.0, 40.0, 30.0)
    repair = box(10.3, 7.1, 13.3, 10.1)
    t = board_takeoff_over_origins(repair, board_m=(1.2, 2.4), roof=roof)
    counts = [_count_by_hand(repair, 1.2, 2.4, i * 1.2 / ORIGIN_STEPS, j * 2.4 / ORIGIN_STEPS)
              for i in range(ORIGIN_STEPS) for j in range(ORIGIN_STEPS)]
    assert t.origins_tried == ORIGIN_STEPS**2 == 49
    assert t.count_range == (min(counts), max(counts))
    assert min(counts) < max(counts)  # the joints matter here: 3 x 2 = 6 up to 4 x 3 = 12
    assert (min(counts), max(counts)) == (6, 12)  # ceil(3 / 1.2) x ceil(3 / 2.4) .. +1 each, by hand
    assert t.count == sorted(counts)[len(counts) // 2]
    # the reported boards are those of one grid: the origin's own count, consistent geometry
    again = board_takeoff(repair, board_m=(1.2, 2.4), roof=roof, angle_deg=0.0, origin_xy=t.origin_xy)
    assert again.count == t.count and len(t.boards) == t.count
    assert t.board_area_m2 == pytest.approx(t.count * 1.2 * 2.4)
    assert "median" in t.origin_rule and "49 grid origins" in t.origin_rule
    assert t.range_note is not None and f"from {min(counts)} to {max(counts)}" in t.range_note


def test_board_origin_given_is_exact():
    # With [repair] board_origin (a board corner found on site) the count is exact: no
    # range, no sweep.
    roof = box(0.0, 0.0, 40.0, 30.0)
    repair = box(10.3, 7.1, 13.3, 10.1)
    q = compute_quantities([repair], ["wet"], outline=roof,
                           settings=Repair(margin_m=0.0, board_m=(1.2, 2.4), board_origin=(10.3, 7.1)))
    assert q.takeoff.count == _count_by_hand(repair, 1.2, 2.4, 10.3, 7.1) == 6  # 3 x 2 from the joint
    assert q.takeoff.count_range is None and q.takeoff.range_note is None
    assert "board_origin" in q.takeoff.origin_rule
    # without it, the sweep's median and range
    q = compute_quantities([repair], ["wet"], outline=roof, settings=Repair(margin_m=0.0, board_m=(1.2, 2.4)))
    assert q.takeoff.count_range == (6, 12)


def test_board_range_in_outputs(tmp_path):
    # summary.json, quantities.csv and the report carry the range when no origin is given
    import csv
    import json

    from wetmap.demo import RoofScene, write_roof_survey
    from wetmap.pipeline import run_survey

    folder = tmp_path / "s"
    write_roof_survey(folder, RoofScene(crs="local", origin_xy=(0.0, 0.0)))
    result = run_survey(folder)
    out = folder / "results"
    s = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    low, high = s["boards_range"]
    assert low <= s["boards"] <= high
    assert "median" in s["method"]["board_origin_rule"]
    ends = list(csv.DictReader((out / "board_range.csv").open(encoding="utf-8")))
    assert [r["end"] for r in ends] == ["fewest", "most"]
    assert [int(r["boards"]) for r in ends] == [low, high]
    assert "board_range" not in s and result.takeoff.count == s["boards"]
    html = (out / "report.html").read_text(encoding="utf-8")
    assert f"fewest to most with where the joints lie</th><td class='num'>{low} to {high}</td>" in html
    assert "Board grid origin" in html
    if low < high:
        assert any("whole boards:" in w and "board_origin" in w for w in s["warnings"])


def test_unique_pairs_equal_numpy_unique_rows():
    """The take-off's one-key unique of integer pairs: numpy's np.unique(axis=0) as the reference."""
    from wetmap.quantities import _unique_pairs

    rng = np.random.default_rng(7)
    for _ in range(50):
        ij = rng.integers(-60, 60, size=(int(rng.integers(1, 3000)), 2))
        got, ref = _unique_pairs(ij), np.unique(ij, axis=0)
        assert got.dtype == ref.dtype and np.array_equal(got, ref)
    assert _unique_pairs(np.empty((0, 2), dtype=np.int64)).shape == (0, 2)


@pytest.mark.parametrize("angle_deg", [0.0, 17.3, 90.0, -33.1, 180.0, 271.5])
def test_boards_turned_in_one_call_equal_shapely_affinity(angle_deg):
    """Boards turned back to plan coordinates in one call: the same coordinates, bit for bit,
    as shapely.affinity.rotate about the origin (the reference)."""
    from wetmap.quantities import _rotated_about_origin

    x0 = 500000.3 + 1.7 * np.arange(40)
    y0 = 5400000.1 + np.arange(40.0)
    cells = shapely.box(x0, y0, x0 + 1.2, y0 + 2.4)
    got = _rotated_about_origin(cells, angle_deg)
    for g, c in zip(got, cells):
        assert np.array_equal(shapely.get_coordinates(g),
                              shapely.get_coordinates(affinity.rotate(c, angle_deg, origin=(0.0, 0.0))))
