"""Equipment presets against the published specifications they cite."""
import pytest

from feltlab.standards import TABLES, table_preset

INCH = 25.4


def test_pool_9ft_matches_wpa():
    # WPA Tournament Table & Equipment Specifications (2001), secondary copy:
    # 9-ft playing surface 100 x 50 in (2540 x 1270 mm), +/- 1/8 in.
    t = table_preset("pool-9ft")
    assert t.length_mm == pytest.approx(2540.0, abs=0.05)
    assert t.width_mm == pytest.approx(1270.0, abs=0.05)
    assert t.surface_tol_mm == pytest.approx(3.175, abs=0.01)


def test_pool_8ft_matches_wpa():
    # WPA (2001), secondary copy: 8-ft playing surface 92 x 46 in (2337 x 1168 mm).
    t = table_preset("pool-8ft")
    assert t.length_mm == pytest.approx(2337, abs=0.5)
    assert t.width_mm == pytest.approx(1168, abs=0.5)


def test_pool_7ft_is_marked_unstandardised():
    # No published standard; 78 x 39 in is common retail practice.
    t = table_preset("pool-7ft")
    assert t.surface_tol_mm is None
    assert (t.length_mm, t.width_mm) == pytest.approx((78 * INCH, 39 * INCH))
    assert "no published standard" in t.source


def test_pool_ball_matches_wpa():
    # WPA (2001), secondary copy: 2 1/4 in (57.15 mm) +/- 0.005 in; 5.5-6 oz (156-170 g).
    b = table_preset("pool-9ft").ball
    assert b.diameter_mm == pytest.approx(57.15, abs=1e-9)
    assert b.diameter_tol_mm == pytest.approx(0.127, abs=1e-9)
    assert b.mass_kg_range == pytest.approx((0.156, 0.170))
    assert b.mass_kg_range[0] <= b.mass_kg <= b.mass_kg_range[1]


def test_pool_nose_height_in_published_band():
    # 1 7/16 in for a 2 1/4 in ball (secondary copy); 62.5-64.5 % of the ball diameter (from memory).
    t = table_preset("pool-9ft")
    ratio = t.cushion_nose_height_mm / t.ball.diameter_mm
    assert 0.625 <= ratio <= 0.645


def test_snooker_matches_wpbsa():
    # WPBSA Official Rules, Section 2 (secondary copy): 3569 x 1778 mm +/- 13 mm; ball 52.5 +/- 0.05 mm.
    t = table_preset("snooker")
    assert (t.length_mm, t.width_mm, t.surface_tol_mm) == (3569.0, 1778.0, 13.0)
    assert (t.ball.diameter_mm, t.ball.diameter_tol_mm) == (52.5, 0.05)


def test_carom_matches_umb():
    # UMB rules art. 2.1 (secondary copy): 2840 x 1420 mm +/- 5 mm, nose 37 +/- 1 mm;
    # ball 61-61.5 mm, 205-220 g (retailers' copies).
    t = table_preset("carom")
    assert (t.length_mm, t.width_mm, t.surface_tol_mm) == (2840.0, 1420.0, 5.0)
    assert t.cushion_nose_height_mm == 37.0
    assert 61.0 <= t.ball.diameter_mm - t.ball.diameter_tol_mm
    assert t.ball.diameter_mm + t.ball.diameter_tol_mm <= 61.5
    assert t.ball.mass_kg_range == (0.205, 0.220)
    assert not t.pockets


def test_every_preset_names_a_source():
    for t in TABLES.values():
        assert t.source and t.ball.source
        assert t.length_mm > t.width_mm > 0


def test_unknown_preset_error_lists_choices():
    with pytest.raises(ValueError, match="pool-9ft"):
        table_preset("pool-10ft")
