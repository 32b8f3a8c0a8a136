"""Aero maps: loading, validation, conversion to the CG convention, interpolation."""

import warnings
from pathlib import Path

import numpy as np
import pytest

from lapbalance import aero
from lapbalance.aeromap import FINE_SUBDIVISIONS, bilinear, load_aero_map
from lapbalance.car import load_car
from lapbalance.errors import InputError, PhysicsWarning

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"
HEADER = ("ride_height_front_mm,ride_height_rear_mm,front_downforce_area_m2,"
          "rear_downforce_area_m2,drag_area_m2")
F_MM = [10.0, 20.0, 35.0, 50.0]
R_MM = [30.0, 45.0, 60.0]


def plane(f_mm, r_mm):
    """A plane in ride height (front, rear, drag areas) [m²]; invented test surface."""
    return (1.5 - 0.01 * f_mm + 0.002 * r_mm, 2.0 + 0.003 * f_mm - 0.006 * r_mm,
            1.1 + 0.001 * f_mm + 0.0005 * r_mm)


def write_map(tmp_path, rows=None, convention="cg", extra_meta="", header=HEADER,
              name="map.csv"):
    if rows is None:
        rows = []
        for r in reversed(R_MM):  # any row order is accepted
            for f in F_MM:
                a, b, d = plane(f, r)
                rows.append(f"{f:g},{r:g},{a!r},{b!r},{d!r}")
    meta = f"# convention: {convention}\n" if convention is not None else ""
    text = "# test map\n" + meta + extra_meta + header + "\n" + "\n".join(rows) + "\n"
    p = tmp_path / name
    p.write_text(text)
    return p


# Source: interpolating spline with zero smoothing passes through its data (Dierckx, Curve and
# Surface Fitting with Splines, 1993, ch. 2); CG convention has no conversion.
def test_grid_values_reproduced_exactly(tmp_path):
    m = load_aero_map(write_map(tmp_path), cg_height=0.3, wheelbase=3.0)
    assert m.rh_front_m == pytest.approx(np.array(F_MM) * 1e-3)
    ff, rr = np.meshgrid(np.array(F_MM), np.array(R_MM), indexing="ij")
    a, b, d = plane(ff, rr)
    fa, ra, da = m.areas_at(ff * 1e-3, rr * 1e-3)
    np.testing.assert_allclose(fa, a, rtol=0, atol=1e-12)
    np.testing.assert_allclose(ra, b, rtol=0, atol=1e-12)
    np.testing.assert_allclose(da, d, rtol=0, atol=1e-12)
    np.testing.assert_array_equal(m.front_area_cg, a)
    # original nodes sit in the fine grid every FINE_SUBDIVISIONS points, exactly
    np.testing.assert_array_equal(m.fine_front_area_cg[::FINE_SUBDIVISIONS,
                                                       ::FINE_SUBDIVISIONS], a)
    assert m.fine_rh_front_m.size == FINE_SUBDIVISIONS * (len(F_MM) - 1) + 1
    for arr in (m.fine_front_area_cg, m.fine_rear_area_cg, m.fine_drag_area,
                m.fine_rh_front_m, m.fine_rh_rear_m):
        assert arr.dtype == np.float64 and arr.flags["C_CONTIGUOUS"]


# Source: a cubic spline (and bilinear interpolation) reproduces any linear function exactly
# (Dierckx 1993, ch. 1: splines of degree >= 1 contain the linear polynomials).
def test_plane_reproduced_by_spline_and_fine_bilinear(tmp_path):
    m = load_aero_map(write_map(tmp_path), cg_height=0.3, wheelbase=3.0)
    rng = np.random.default_rng(1)
    f = rng.uniform(10, 50, 200)
    r = rng.uniform(30, 60, 200)
    a, b, d = plane(f, r)
    fa, ra, da = m.areas_at(f * 1e-3, r * 1e-3)
    np.testing.assert_allclose(fa, a, atol=1e-10)
    np.testing.assert_allclose(ra, b, atol=1e-10)
    np.testing.assert_allclose(da, d, atol=1e-10)
    for table, want in ((m.fine_front_area_cg, a), (m.fine_rear_area_cg, b),
                        (m.fine_drag_area, d)):
        got = bilinear(m.fine_rh_front_m, m.fine_rh_rear_m, table, f * 1e-3, r * 1e-3)
        np.testing.assert_allclose(got, want, atol=1e-10)


def test_scalar_input_returns_floats(tmp_path):
    m = load_aero_map(write_map(tmp_path), cg_height=0.3, wheelbase=3.0)
    out = m.areas_at(0.02, 0.045)
    assert all(isinstance(v, float) for v in out)
    assert out == pytest.approx(plane(20.0, 45.0), abs=1e-12)


# Source: Gillespie, Fundamentals of Vehicle Dynamics, ch. 1 (moments about a contact point):
# ground-referenced splits move to the CG convention by CdA h_cg / L per node; a restraint at
# z by CdA (h_cg - z)/L; the total is unchanged.
@pytest.mark.parametrize("convention, z", [("ground", 0.0), ("restraint", 0.25)])
def test_nodes_converted_to_cg_convention(tmp_path, convention, z):
    meta = f"# restraint_height_m: {z}\n" if convention == "restraint" else ""
    p = write_map(tmp_path, convention=convention, extra_meta=meta)
    h, L = 0.42, 2.65
    m = load_aero_map(p, cg_height=h, wheelbase=L)
    ff, rr = np.meshgrid(np.array(F_MM), np.array(R_MM), indexing="ij")
    a, b, d = plane(ff, rr)
    np.testing.assert_allclose(m.front_area_cg, a + d * (h - z) / L, atol=1e-12)
    np.testing.assert_allclose(m.rear_area_cg, b - d * (h - z) / L, atol=1e-12)
    np.testing.assert_allclose(m.front_area_cg + m.rear_area_cg, a + b, atol=1e-12)
    assert m.convention == convention and m.restraint_height == z
    fa, _, _ = m.areas_at(0.027, 0.05)
    fa0, ra0, da0 = plane(27.0, 50.0)
    assert fa == pytest.approx(aero.to_cg_convention(fa0, ra0, da0, h, L, convention, z)[0],
                               abs=1e-10)


# Source: bilinear interpolation on a unit cell, f(u, v) = sum of corner values times
# (1-u)(1-v), u(1-v), (1-u)v, uv (standard formula); clamped outside.
def test_bilinear_reference_on_one_cell():
    x, y = np.array([0.0, 2.0]), np.array([0.0, 1.0])
    t = np.array([[1.0, 2.0], [3.0, 5.0]])
    assert bilinear(x, y, t, 1.0, 0.5) == pytest.approx(0.25 * (1 + 2 + 3 + 5))
    assert bilinear(x, y, t, -5.0, -5.0) == 1.0
    assert bilinear(x, y, t, 9.0, 9.0) == 5.0
    assert bilinear(x, y, t, 2.0, 0.0) == 3.0


def test_outside_grid_warns_once_and_clamps(tmp_path):
    m = load_aero_map(write_map(tmp_path), cg_height=0.3, wheelbase=3.0)
    with warnings.catch_warnings(record=True) as rec:
        warnings.simplefilter("always")
        fa, ra, da = m.areas_at(np.array([0.005, 0.002, 0.02]), np.array([0.045, 0.045, 0.045]))
    phys = [w for w in rec if issubclass(w.category, PhysicsWarning)]
    assert len(phys) == 1
    assert "outside the aero map" in str(phys[0].message)
    assert "front 10-50 mm" in str(phys[0].message)
    edge = plane(10.0, 45.0)
    assert fa[0] == pytest.approx(edge[0], abs=1e-12)
    assert fa[1] == pytest.approx(edge[0], abs=1e-12)
    assert m.outside(0.005, 0.045) and not m.outside(0.02, 0.045)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        m.areas_at(0.02, 0.045)  # inside: no warning


def test_bounds(tmp_path):
    m = load_aero_map(write_map(tmp_path), cg_height=0.3, wheelbase=3.0)
    assert m.bounds_m == ((0.010, 0.050), (0.030, 0.060))


# --------------------------------------------------------------------------------------------
# Bad maps: one line naming file, line/column and the fix
# --------------------------------------------------------------------------------------------

def _rows(**change):
    rows = []
    for f in F_MM:
        for r in R_MM:
            a, b, d = plane(f, r)
            rows.append([f"{f:g}", f"{r:g}", f"{a:.4f}", f"{b:.4f}", f"{d:.4f}"])
    return rows


def _text(rows):
    return [",".join(r) for r in rows]


def test_ragged_grid_names_missing_node(tmp_path):
    rows = _rows()
    del rows[4]  # front 20 mm, rear 45 mm
    with pytest.raises(InputError, match=r"grid is not complete: 11 of 4 x 3 = 12 nodes.*"
                                         r"missing front 20 mm with rear 45 mm"):
        load_aero_map(write_map(tmp_path, _text(rows)), 0.3, 3.0)


def test_duplicate_node(tmp_path):
    rows = _rows()
    rows.append(list(rows[0]))
    with pytest.raises(InputError, match=r"line 16: duplicate node \(front 10 mm, rear 30 mm\)"
                                         r", first given on line 4"):
        load_aero_map(write_map(tmp_path, _text(rows)), 0.3, 3.0)


@pytest.mark.parametrize("cell, msg", [
    ("nan", "front_downforce_area_m2 = nan is not a finite number"),
    ("inf", "front_downforce_area_m2 = inf is not a finite number"),
    ("abc", 'front_downforce_area_m2 = "abc" is not a number; give a number'),
    ("", 'front_downforce_area_m2 = "" is not a number'),
])
def test_bad_cell(tmp_path, cell, msg):
    rows = _rows()
    rows[2][2] = cell
    with pytest.raises(InputError, match="line 6: " + msg):
        load_aero_map(write_map(tmp_path, _text(rows)), 0.3, 3.0)


def test_decimal_comma_hint(tmp_path):
    rows = _rows()
    rows[0][4] = '"1,1"'
    with pytest.raises(InputError, match="with a '.' decimal point"):
        load_aero_map(write_map(tmp_path, _text(rows)), 0.3, 3.0)


def test_missing_column(tmp_path):
    header = ",".join(HEADER.split(",")[:4])
    rows = [r[:4] for r in _rows()]
    with pytest.raises(InputError, match='missing column "drag_area_m2"'):
        load_aero_map(write_map(tmp_path, _text(rows), header=header), 0.3, 3.0)


def test_unknown_column_suggests(tmp_path):
    header = HEADER.replace("drag_area_m2", "drag_area")
    with pytest.raises(InputError, match='unknown column "drag_area"; did you mean '
                                         '"drag_area_m2"'):
        load_aero_map(write_map(tmp_path, _text(_rows()), header=header), 0.3, 3.0)


def test_ride_heights_in_metres(tmp_path):
    rows = _rows()
    for r in rows:
        r[0] = f"{float(r[0]) / 1000:g}"
    with pytest.raises(InputError, match=r"ride_height_front_mm: ride_height_front_mm values "
                                         r"\(0.01 to 0.05\) look like metres.*multiply by 1000"):
        load_aero_map(write_map(tmp_path, _text(rows)), 0.3, 3.0)


def test_single_value_axis(tmp_path):
    rows = [r for r in _rows() if r[0] == "10"]
    with pytest.raises(InputError, match="ride_height_front_mm has 1 distinct value.*at least 2"):
        load_aero_map(write_map(tmp_path, _text(rows)), 0.3, 3.0)


def test_wrong_cell_count(tmp_path):
    rows = _rows()
    rows[1] = rows[1][:3]
    with pytest.raises(InputError, match="line 5: has 3 values but the header has 5 columns"):
        load_aero_map(write_map(tmp_path, _text(rows)), 0.3, 3.0)


def test_negative_drag(tmp_path):
    rows = _rows()
    rows[3][4] = "-0.5"
    with pytest.raises(InputError, match="drag_area_m2 = -0.5 is negative"):
        load_aero_map(write_map(tmp_path, _text(rows)), 0.3, 3.0)


def test_missing_convention(tmp_path):
    with pytest.raises(InputError, match='missing "# convention: cg|ground|restraint"'):
        load_aero_map(write_map(tmp_path, convention=None), 0.3, 3.0)


def test_unknown_convention_suggests(tmp_path):
    with pytest.raises(InputError, match='convention "grund" is not one of.*did you mean '
                                         '"ground"'):
        load_aero_map(write_map(tmp_path, convention="grund"), 0.3, 3.0)


def test_misspelt_metadata_key(tmp_path):
    with pytest.raises(InputError, match='unknown metadata "# restraint_hight_m:"'):
        load_aero_map(write_map(tmp_path, convention="restraint",
                                extra_meta="# restraint_hight_m: 0.3\n"), 0.3, 3.0)


def test_restraint_needs_height(tmp_path):
    with pytest.raises(InputError, match='"restraint" needs a "# restraint_height_m'):
        load_aero_map(write_map(tmp_path, convention="restraint"), 0.3, 3.0)


def test_restraint_height_in_mm(tmp_path):
    with pytest.raises(InputError, match="looks like mm, write 0.3"):
        load_aero_map(write_map(tmp_path, convention="restraint",
                                extra_meta="# restraint_height_m: 300\n"), 0.3, 3.0)


def test_missing_file(tmp_path):
    with pytest.raises(InputError, match="aero map file not found"):
        load_aero_map(tmp_path / "nope.csv", 0.3, 3.0)


def test_no_rows(tmp_path):
    with pytest.raises(InputError, match="has a header but no data rows"):
        load_aero_map(write_map(tmp_path, []), 0.3, 3.0)


# --------------------------------------------------------------------------------------------
# Demo map and the mapped car variant
# --------------------------------------------------------------------------------------------

def test_demo_map_and_mapped_car():
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        car = load_car(EXAMPLES / "single_seater_mapped.toml")
    m = car.aero.aero_map
    assert m is not None and m.convention == "cg"
    sus = car.suspension
    assert not m.outside(sus.static_ride_height_front, sus.static_ride_height_rear)
    # Common practice: a high-downforce single-seater's floor stalls when run too low; the
    # demo map must show downforce falling again below ~15 mm front ride height.
    fa_low = m.areas_at(0.010, 0.045)[0]
    fa_mid = m.areas_at(0.016, 0.045)[0]
    assert fa_low < fa_mid
    # static values agree with the base car's fixed aero (3.50 m², 0.42 CG convention, 1.20 m²)
    base = load_car(EXAMPLES / "single_seater.toml").aero
    assert car.aero.downforce_area == pytest.approx(base.downforce_area, abs=1e-9)
    assert car.aero.balance_cg == pytest.approx(base.balance_cg, abs=1e-9)
    assert car.aero.drag_area == pytest.approx(base.drag_area, abs=1e-9)
