"""Registry of the reference checks: published value, its source, tolerance, and the tool's value.

Every check of the tool against a published formula, table, standard, closed form or
general-purpose reference library lives here as a :class:`Case`: what is checked, where the
expected value comes from (book, edition, chapter or equation; our own derivations say so),
the expected value and its tolerance, the test that asserts it, and a ``compute`` function
that asks the tool for its value. The tests read their check values from here
(``CASES[id].approx()``) and assert on ``CASES[id].value()``; ``scripts/make_validation.py``
runs the same functions and writes ``docs/validation.md``; ``tests/test_validation_doc.py``
fails when that file is out of date.

The inputs of each case are invented test fixtures or the inputs printed with the published
example; no demo-car value is a check value. Computations are cached, so a case computed by
its test is not computed again by the staleness test in the same run.

To add a reference check: write a ``_case(...)`` entry below (with a ``compute`` that calls
the tool), then assert it in a test whose name the entry gives (``assert c.value() ==
c.approx()``), and regenerate the table with ``python scripts/make_validation.py``.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from functools import cache

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.optimize import brentq

from lapbalance import aero as _aero_mod
from lapbalance import air as _air_mod
from lapbalance import handling as _handling_mod
from lapbalance import loads, tunnel, tyre
from lapbalance.lap import evaluate_forces, limits_at, simulate_lap, steady_state
from lapbalance.units import G0
from tests.helpers import analytic_track, circle, make_car, straight

GILLESPIE = "Gillespie, *Fundamentals of Vehicle Dynamics*, SAE 1992"
RCVD = "Milliken & Milliken, *Race Car Vehicle Dynamics*, SAE 1995"
CIPM = ("Picard, Davis, Gläser, Fujii, \"Revised formula for the density of moist air "
        "(CIPM-2007)\", *Metrologia* 45 (2008) 149-155")
ISA = "ISO 2533:1975 *Standard Atmosphere* (troposphere)"
J1594 = "SAE J1594 (2010) *Vehicle Aerodynamics Terminology*"


@dataclass(frozen=True)
class Case:
    """One reference check.

    Attributes
    ----------
    id : str
        Dotted identifier, ``topic.check[.detail]``.
    topic : str
        Section of the validation table (and of docs/method.md) it belongs to.
    quantity : str
        What is checked, with the inputs that matter.
    source : str
        Published source of the expected value; "(our derivation)" where the value follows
        from a published method by our own statics or algebra.
    expected : float
        Expected value, as printed by the source (or computed from its formula).
    unit : str
        Unit of expected and tool values ("-" for dimensionless).
    test : str
        ``file::function`` of the test that asserts the check.
    compute : callable
        No-argument function returning the tool's value (cached).
    rel, abs : float or None
        Tolerance passed to :func:`pytest.approx` (None = pytest's default).
    """

    id: str
    topic: str
    quantity: str
    source: str
    expected: float
    unit: str
    test: str
    compute: Callable[[], float]
    rel: float | None = None
    abs: float | None = None

    def approx(self):
        """``pytest.approx`` of the expected value with this case's tolerance."""
        return pytest.approx(self.expected, rel=self.rel, abs=self.abs)

    def value(self) -> float:
        """The tool's value [unit]."""
        return float(self.compute())

    def passes(self) -> bool:
        """True when the tool's value is within tolerance."""
        return self.value() == self.approx()

    def tolerance_text(self) -> str:
        """Tolerance as a short text (``rel 1e-07``, ``abs 0.0002``, ``rel 1e-06 (default)``)."""
        parts = []
        if self.rel is not None:
            parts.append(f"rel {self.rel:.0e}")
        if self.abs is not None:
            parts.append(f"abs {self.abs:.1g}")
        return " or ".join(parts) if parts else "rel 1e-06 (default)"


CASES: dict[str, Case] = {}


def _case(id, topic, quantity, source, expected, unit, test, compute, rel=None, abs=None):
    if id in CASES:
        raise ValueError(f"duplicate reference case {id}")
    CASES[id] = Case(id, topic, quantity, source, float(expected), unit, test, compute, rel,
                     abs)


def ids(prefix: str) -> list[str]:
    """Case ids starting with ``prefix`` (for ``pytest.mark.parametrize``)."""
    return [k for k in CASES if k == prefix or k.startswith(prefix + ".")]


def _worst(values, expected):
    """The element of ``values`` farthest from ``expected`` (an all-steps check passes iff it
    does)."""
    v = np.asarray(values, float)
    return float(v[np.argmax(np.abs(v - expected))])


# ============================================================================================
# Axle loads
# ============================================================================================

T_LOADS = "Axle loads and load transfer"


@cache
def gillespie_state():
    """steady_state of the Gillespie ch. 1 example car (drag at 0.6 m, grade 2°, a_x 2)."""
    # a zero-lift aero split with the drag reacted at its own height = drag acting at 0.6 m
    car = make_car(aero={"drag_area_m2": 0.7, "balance_convention": "restraint",
                         "restraint_height_m": 0.6})
    return steady_state(car, 40.0, grade=math.radians(2.0), ax=2.0)


_G1 = ("m = 1200 kg, L = 2.6 m, front axle to CG 1.2 m, h = 0.5 m, CdA = 0.7 m², "
       "v = 40 m/s, drag at 0.6 m, a_x = 2 m/s², grade 2°")
_T = "test_loads.py::test_gillespie_axle_load_equation_with_drag_grade_and_acceleration"
_case("loads.gillespie.drag", T_LOADS, f"drag ({_G1})",
      "½ ρ CdA v², ρ = 1.225 kg/m³", 686.0, "N", _T, lambda: gillespie_state()["drag"],
      rel=1e-9)
_case("loads.gillespie.front", T_LOADS, f"front axle load ({_G1})",
      f"{GILLESPIE}, ch. 1, dynamic axle loads (evaluated)", 5633.9183, "N", _T,
      lambda: gillespie_state()["fzf"], rel=1e-7)
_case("loads.gillespie.rear", T_LOADS, f"rear axle load ({_G1})",
      f"{GILLESPIE}, ch. 1, dynamic axle loads (evaluated)", 6126.8930, "N", _T,
      lambda: gillespie_state()["fzr"], rel=1e-7)


@cache
def braking_breakdown_state():
    """steady_state of the braking-with-downforce example (a_x = -10 m/s², v = 50 m/s)."""
    car = make_car(chassis={"mass_kg": 1300.0, "wheelbase_m": 2.7,
                            "front_weight_fraction": 1.3 / 2.7, "cg_height_m": 0.45},
                   aero={"downforce_area_m2": 2.0, "balance_front": 0.4, "drag_area_m2": 0.85,
                         "balance_convention": "restraint", "restraint_height_m": 0.4})
    return steady_state(car, 50.0, ax=-10.0)


_B1 = ("m = 1300 kg, L = 2.7 m, front axle to CG 1.4 m, h = 0.45 m, drag at 0.40 m, "
       "CdA = 0.85 m², ClA = 2.0 m² (drag-free front share 0.40), v = 50 m/s, a_x = -10 m/s²")
_SB = f"{GILLESPIE}, ch. 1 statics, per-part breakdown (our derivation)"
_T = "test_loads.py::test_reference_breakdown_braking_with_downforce"
for _k, _q, _e in (("front", "fzf", 9337.0791), ("rear", "fzr", 6474.0659),
                   ("static_front", "statf", 6138.2365), ("static_rear", "statr", 6610.4085)):
    _case(f"loads.braking.{_k}", T_LOADS, f"{_k.replace('_', ' ')} axle load ({_B1})", _SB,
          _e, "N", _T, (lambda q=_q: braking_breakdown_state()[q]), rel=1e-7)
_case("loads.braking.sum", T_LOADS, f"sum of the axle loads = m g + q ClA ({_B1})", _SB,
      15811.1450, "N", _T,
      lambda: braking_breakdown_state()["fzf"] + braking_breakdown_state()["fzr"], rel=1e-7)


def longitudinal_transfer(a_g):
    """(ground transfer, front-load loss) [N] for m = 1200 kg, h = 0.5, L = 2.6 at a_g [g]."""
    m, h, L = 1200.0, 0.5, 2.6
    x = m * a_g * G0  # level road, no drag: ground force = m a
    sf, sr, gt, fzf, fzr = loads.longitudinal_loads(m, G0, 1.2, 1.4, L, h, 0.0, 0.0, x)
    return gt, sf - fzf


_T = "test_loads.py::test_longitudinal_transfer_m_a_h_over_l"
for _a, _e in ((1.0, 2263.0731), (0.5, 1131.5365)):
    _case(f"loads.longitudinal.{_a:g}g", T_LOADS,
          f"longitudinal transfer m a h/L at a = {_a:g} g (m = 1200 kg, h = 0.5 m, L = 2.6 m)",
          f"{GILLESPIE}, ch. 1, dynamic axle loads", _e, "N", _T,
          (lambda a=_a: longitudinal_transfer(a)[0]), rel=1e-7)


@cache
def milliken_lateral():
    return loads.lateral_transfer(1200.0, G0, 1.2, 1.4, 2.6, 0.5, 1.60, 1.58, 0.05, 0.10, 0.6,
                                  1e6, 1e6)


_ML = ("m = 1200 kg, a_y = 1 g, t_f = 1.60 m, t_r = 1.58 m, h = 0.5 m, roll centres "
       "0.05 / 0.10 m, front roll-stiffness share 0.6, front axle to CG 1.2 m, L = 2.6 m")
_SL = f"{RCVD}, ch. 18, steady-state lateral load transfer (evaluated)"
_T = "test_loads.py::test_milliken_lateral_transfer_per_axle"
_case("loads.lateral.front", T_LOADS, f"front lateral transfer ({_ML})", _SL, 2082.0272, "N",
      _T, lambda: milliken_lateral()[0], rel=1e-7)
_case("loads.lateral.rear", T_LOADS, f"rear lateral transfer ({_ML})", _SL, 1615.6623, "N",
      _T, lambda: milliken_lateral()[1], rel=1e-7)
_case("loads.lateral.moment", T_LOADS, f"t_f ΔF_f + t_r ΔF_r = m a_y h ({_ML})",
      f"{RCVD}, ch. 18, roll-moment balance (exact identity)", 5883.9900, "N·m", _T,
      lambda: 1.60 * milliken_lateral()[0] + 1.58 * milliken_lateral()[1], rel=1e-7)


# ============================================================================================
# Tyres
# ============================================================================================

T_TYRE = "Tyre capacity and the friction ellipse"
_RCVD_A, _RCVD_B = 1.245000, -3.247240e-5  # least-squares fit to RCVD Fig. 2.9 (see source)


def _rcvd_tyre():
    fz0 = 4000.0
    mu0 = _RCVD_A + _RCVD_B * fz0
    return mu0, -_RCVD_B * fz0 / mu0, fz0


_T = "test_tyre.py::test_linear_load_sensitivity_generic"
for _fz, _e in ((1500, 2520.0), (3000, 4800.0), (4500, 6840.0), (6000, 8640.0)):
    _case(f"tyre.linear.{_fz}", T_TYRE,
          f"tyre capacity μ(Fz)·Fz at Fz = {_fz} N (μ0 = 1.6, Fz0 = 3000 N, k = 0.10)",
          f"linear load sensitivity μ = μ0 (1 − k (Fz − Fz0)/Fz0); {RCVD}, ch. 2 "
          "(load sensitivity); common practice form", _e, "N", _T,
          (lambda fz=_fz: tyre.tyre_capacity(
              float(fz), 1.6, 0.10, 3000.0)))

_T = "test_tyre.py::test_axle_capacity_loss_from_lateral_transfer_rcvd_fit"
_SF = (f"least-squares line μ = a + b·Fz through the peak-μ data of {RCVD}, Fig. 2.9 "
       "(our fit: a = 1.245, b = −3.24724e-5 1/N)")
for _k, _o, _i, _e in (("no_transfer", 4000.0, 4000.0, 8920.8831),
                       ("transfer_2000", 6000.0, 2000.0, 8661.1039)):
    _case(f"tyre.rcvd_axle.{_k}", T_TYRE,
          f"axle capacity at 8000 N, wheel loads {_o:g} / {_i:g} N (RCVD-fit tyre)", _SF, _e,
          "N", _T,
          (lambda o=_o, i=_i: tyre.axle_capacity(
              o, i, *_rcvd_tyre())), rel=1e-6)
_case("tyre.rcvd_peak_load", T_TYRE, "load where (a + b Fz)·Fz peaks, −a/(2b) (RCVD-fit tyre)",
      _SF, 19170.12, "N", "test_tyre.py::test_peak_load_of_rcvd_fit",
      lambda: tyre.peak_load(_rcvd_tyre()[1], 4000.0),
      rel=1e-6)

_T = "test_tyre.py::test_friction_ellipse_available_force"
for _fy, _e in ((0.0, 6000.0), (3250.0, 5196.1524), (5000.0, 3833.8264), (6500.0, 0.0)):
    _case(f"tyre.ellipse.{_fy:g}", T_TYRE,
          f"longitudinal force left at Fy = {_fy:g} N (Fx,max = 6000 N, Fy,max = 6500 N)",
          "friction ellipse (Fx/Fx,max)² + (Fy/Fy,max)² = 1; Lenzo & Rossi, *Applied "
          "Sciences* 10(4):1498, 2020 (combined grip in a lap model)", _e, "N", _T,
          (lambda fy=_fy: tyre.available_longitudinal(
              fy, 6000.0, 6500.0)), abs=1e-4)


@cache
def magic_formula_peak_car_tyre():
    mf = make_car(tyres={"front": {"peak_friction": None, "model": "magic-formula-peak",
                                   "pdy1": 1.5, "pdy2": -0.15, "pdx1": 1.6, "pdx2": -0.08,
                                   "reference_load_n": 3000.0}})
    return mf.tyres.front


_case("tyre.magic_formula_peak", T_TYRE,
      "lateral capacity at 4500 N from Magic Formula peak factors pDy1 = 1.5, pDy2 = −0.15, "
      "Fz0 = 3000 N: (pDy1 + pDy2·dfz)·Fz",
      "Pacejka, *Tire and Vehicle Dynamics*, ch. 4, peak factor μ = pD1 + pD2·dfz (from "
      "memory)", 1.425 * 4500.0, "N",
      "test_tyre.py::test_magic_formula_peak_option_maps_to_linear_law",
      lambda: tyre.tyre_capacity(
          4500.0, magic_formula_peak_car_tyre().mu_lateral,
          magic_formula_peak_car_tyre().k_lateral, magic_formula_peak_car_tyre().reference_load))


# ============================================================================================
# Air
# ============================================================================================

T_AIR = "Air density"


def _air():
    return _air_mod


_T = "test_air.py::test_iso2533_density_geopotential_altitude"
for _h, _e in ((0.0, 1.22500), (500.0, 1.16727), (1000.0, 1.11164), (2000.0, 1.00649)):
    _case(f"air.isa_geopotential.{_h:g}m", T_AIR,
          f"standard-atmosphere density at geopotential altitude {_h:g} m",
          f"{ISA}: p0 = 101325 Pa, T0 = 288.15 K, −6.5 K/km, R = 287.05287 J/(kg K)", _e,
          "kg/m³", _T, (lambda h=_h: _air().isa_density(h, geopotential=True)), rel=1e-3)
_T = "test_air.py::test_iso2533_density_geometric_altitude"
for _h, _e, _s in ((0.0, 1.22500, ISA), (500.0, 1.16727, ISA), (1000.0, 1.11166, ISA),
                   (2000.0, 1.00655, ISA),
                   (2000.0, 0.8217 * 1.225, "ISO 2533 relative-density table, σ = 0.8217 at "
                                            "2000 m (times 1.225 kg/m³)")):
    _case(f"air.isa_geometric.{_h:g}m" + (".table" if "table" in _s else ""), T_AIR,
          f"standard-atmosphere density at geometric altitude {_h:g} m", _s, _e, "kg/m³", _T,
          (lambda h=_h: _air().isa_density(h)), rel=1e-3)
_T = "test_air.py::test_iso2533_temperature_and_pressure_at_2000m"
_case("air.isa_temperature_2000m", T_AIR, "standard-atmosphere temperature at H = 2000 m",
      f"{ISA}, T = T0 − 6.5 K/km · H", 275.15, "K", _T,
      lambda: _air().isa_temperature(2000.0, geopotential=True), abs=1e-9)
_case("air.isa_pressure_2000m", T_AIR, "standard-atmosphere pressure at H = 2000 m",
      f"{ISA}, p = p0 (T/T0)^5.255880", 79495.20, "Pa", _T,
      lambda: _air().isa_pressure(2000.0, geopotential=True), rel=1e-6)
_case("air.geopotential_2000m", T_AIR, "geopotential altitude of 2000 m geometric",
      f"{ISA}, H = r z/(r + z), r = 6356766 m", 2000.0 - 0.6291, "m",
      "test_air.py::test_geopotential_altitude_of_2000m_geometric",
      lambda: _air().geopotential_altitude(2000.0), abs=1e-3)
_T = "test_air.py::test_cipm2007_moist_air_density"
for _p, _t, _rh, _e in ((101325.0, 20.0, 0.50, 1.19931), (101325.0, 20.0, 0.00, 1.20456),
                        (101325.0, 15.0, 0.00, 1.22552), (101325.0, 30.0, 0.80, 1.15001),
                        (101325.0, 15.0, 0.50, 1.22163)):
    _case(f"air.cipm2007.{_t:g}c_{_rh * 100:g}pct", T_AIR,
          f"moist-air density at {_p:g} Pa, {_t:g} °C, {_rh * 100:g} % RH",
          f"{CIPM}, eq. (1) with the appendix constants (evaluated)", _e, "kg/m³", _T,
          (lambda p=_p, t=_t, rh=_rh: _air().humid_air_density_cipm2007(p, t + 273.15, rh)),
          rel=1e-5)
_case("air.cipm2007_saturation_20c", T_AIR, "saturation vapour pressure of water at 20 °C",
      f"{CIPM}, appendix eq. A1.3", 2339.16, "Pa",
      "test_air.py::test_cipm2007_saturation_vapour_pressure_20c",
      lambda: _air().saturation_vapour_pressure_cipm2007(293.15), rel=1e-5)
_case("air.ideal_gas_sea_level", T_AIR, "ideal-gas density at 101325 Pa, 288.15 K",
      f"{ISA}, sea-level density 1.225 kg/m³", 1.225, "kg/m³",
      "test_air.py::test_ideal_gas_density_at_iso_sea_level",
      lambda: _air().ideal_gas_density(101325.0, 288.15), rel=5e-4)


# ============================================================================================
# Aero conventions, SAE J1594, tunnel correction
# ============================================================================================

T_AERO = "Aero conventions, SAE J1594 and the tunnel correction"


def _aero():
    return _aero_mod


_SJD = (f"{J1594} split C_LF = C_L/2 + C_PM, C_LR = C_L/2 − C_PM, against a public "
        "wind-tunnel data set printing CL, CPM, CLF, CLR together (huggingface.co/datasets/"
        "rvalerio/windtunnel, file 2/coeff.json)")
_T = "test_aero.py::test_j1594_split_matches_public_data_set_row"
_case("aero.j1594_dataset.clf", T_AERO, "C_LF from C_L = 0.4542572, C_PM = 0.4432577", _SJD,
      0.6703862, "-", _T,
      lambda: _aero().j1594_axle_lift_coefficients(0.4542572, 0.4432577)[0], abs=2e-7)
_case("aero.j1594_dataset.clr", T_AERO, "C_LR from C_L = 0.4542572, C_PM = 0.4432577", _SJD,
      -0.2161291, "-", _T,
      lambda: _aero().j1594_axle_lift_coefficients(0.4542572, 0.4432577)[1], abs=2e-7)
_case("aero.j1594_dataset.cl", T_AERO, "C_L from C_LF = 0.6703862, C_LR = −0.2161291", _SJD,
      0.4542572, "-", _T,
      lambda: _aero().j1594_total_and_moment(0.6703862, -0.2161291)[0], abs=2e-7)
_case("aero.j1594_dataset.cpm", T_AERO, "C_PM from C_LF = 0.6703862, C_LR = −0.2161291", _SJD,
      0.4432577, "-", _T,
      lambda: _aero().j1594_total_and_moment(0.6703862, -0.2161291)[1], abs=2e-7)

_T = "test_aero.py::test_restraint_shift_limits"
_SR = f"{GILLESPIE}, ch. 1, moments about a tyre contact point: ΔF = D (h_cg − z)/L"
_case("aero.restraint_shift.ground", T_AERO,
      "ground → CG shift, D = 1000 N, h_cg = 0.4 m, L = 2.5 m, z = 0", _SR, 160.0, "N", _T,
      lambda: _aero().restraint_shift(1000.0, 0.4, 2.5, 0.0), rel=1e-12)
_case("aero.restraint_shift.front", T_AERO,
      "front in CG convention, restraint at z = 0.1 m (500 / 700 N measured, D = 1000 N)", _SR,
      620.0, "N", _T,
      lambda: _aero().to_cg_convention(500.0, 700.0, 1000.0, 0.4, 2.5, "restraint", 0.1)[0])
_case("aero.restraint_shift.rear", T_AERO,
      "rear in CG convention, restraint at z = 0.1 m (500 / 700 N measured, D = 1000 N)", _SR,
      580.0, "N", _T,
      lambda: _aero().to_cg_convention(500.0, 700.0, 1000.0, 0.4, 2.5, "restraint", 0.1)[1])

# wheel-restrained worked example: C_L = -3, C_D = 1, A = 1.5 m², WB = 3 m, h_D = 0.35 m
WB, HD, CD, A = 3.0, 0.35, 1.00, 1.5
_SW = (f"{J1594} ground-referenced coefficients with moments about a contact point "
       f"({GILLESPIE}, ch. 1) (our derivation)")
_WX = "C_L = −3.00, C_D = 1.00, A = 1.5 m², WB = 3.0 m, h_D = 0.35 m, C_LF = −1.20 measured"


def drag_free_split(cg_height):
    """(front, rear) drag-free lift coefficients, front share, centre of pressure [m]."""
    aero = _aero()
    front_cg, rear_cg = aero.to_cg_convention(1.20, 1.80, CD, cg_height, WB, "ground")
    d = CD * (HD - cg_height) / WB  # vertical force alone = CG convention + C_D (h_D - h)/L
    xcp = aero.vertical_centre_of_pressure(front_cg, rear_cg, CD, cg_height, HD, WB)
    return (-(front_cg + d), -(rear_cg - d), float(aero.balance(front_cg + d, rear_cg - d)),
            xcp)


_T = "test_aero.py::test_restrained_balance_worked_example_drag_free_split"
_case("aero.restrained.clf_drag_free", T_AERO,
      f"drag-free C_LF ({_WX}; any h_cg, shown at 0.30 m)", _SW, -1.316667, "-", _T,
      lambda: drag_free_split(0.30)[0], rel=1e-5)
_case("aero.restrained.clr_drag_free", T_AERO,
      f"drag-free C_LR ({_WX}; any h_cg, shown at 0.30 m)", _SW, -1.683333, "-", _T,
      lambda: drag_free_split(0.30)[1], rel=1e-5)
_case("aero.restrained.balance_drag_free", T_AERO,
      f"drag-free front share ({_WX}; any h_cg, shown at 0.30 m)", _SW, 0.438889, "-", _T,
      lambda: drag_free_split(0.30)[2], rel=1e-5)
_case("aero.restrained.balance_measured", T_AERO, f"measured front share ({_WX})", _SW,
      0.400000, "-", _T, lambda: _aero().balance(1.20, 1.80), rel=1e-6)
_case("aero.restrained.centre_of_pressure", T_AERO,
      f"vertical centre of pressure behind the front axle ({_WX}; any h_cg, shown at 0.30 m)",
      "lever rule on the drag-free split (our derivation)", WB * 1.683333 / 3.0, "m", _T,
      lambda: drag_free_split(0.30)[3], rel=1e-5)

_T = "test_aero.py::test_restrained_balance_worked_example_moment_coefficient_and_forces"
_case("aero.restrained.cl", T_AERO, f"C_L from C_LF, C_LR ({_WX})", J1594, -3.0, "-", _T,
      lambda: _aero().j1594_total_and_moment(-1.20, -1.80)[0], rel=1e-12)
_case("aero.restrained.cpm", T_AERO, f"C_PM (ground reference), measured ({_WX})", _SW, 0.3,
      "-", _T, lambda: _aero().j1594_total_and_moment(-1.20, -1.80)[1], rel=1e-6)
_case("aero.restrained.cpm_drag_free", T_AERO, f"C_PM, drag-free ({_WX})", _SW, 0.183333, "-",
      _T, lambda: _aero().j1594_total_and_moment(-1.316667, -1.683333)[1], rel=1e-5)
_case("aero.restrained.q", T_AERO, "dynamic pressure at 50 m/s, ρ = 1.225 kg/m³",
      "definition of dynamic pressure, q = ½ ρ v²", 1531.25, "Pa", _T,
      lambda: _aero().dynamic_pressure(1.225, 50.0), rel=1e-12)
_case("aero.restrained.couple", T_AERO, f"drag couple per axle D h_D/WB at 50 m/s ({_WX})",
      _SW, 267.9688, "N", _T,
      lambda: _aero().restraint_shift(_aero().dynamic_pressure(1.225, 50.0) * A * CD, HD, WB,
                                      0.0), rel=1e-6)


def known_car_ground_reading():
    """What wheel-restrained scales would read for the braking-example car (areas, m²)."""
    aero = _aero()
    L, h, ha, cda = 2.7, 0.45, 0.40, 0.85
    f_cg, r_cg = aero.to_cg_convention(0.8, 1.2, cda, h, L, "restraint", ha)
    f_g, r_g = aero.from_cg_convention(f_cg, r_cg, cda, h, L, "ground")
    return -f_g, -r_g, float(aero.balance(f_g, r_g))


_T = "test_aero.py::test_wheel_restrained_reading_of_known_car"
_KC = "car of the braking example (L = 2.7 m, h = 0.45 m, drag at 0.40 m, CdA 0.85, ClA 2.0)"
for _i, (_k, _e, _u) in enumerate((("front_cla", -0.674074, "m²"),
                                   ("rear_cla", -1.325926, "m²"),
                                   ("apparent_front_share", 0.337037, "-"))):
    _case(f"aero.known_car_ground.{_k}", T_AERO,
          f"wheel-restrained reading, {_k.replace('_', ' ')} ({_KC})", _SW, _e, _u, _T,
          (lambda i=_i: known_car_ground_reading()[i]), rel=1e-5)


def three_bookkeepings():
    """Axle loads of the braking example by three book-keepings: ((f, r) x 3, X)."""
    aero = _aero()
    M, L, B, C, H, HA, CDA, CLA, AX = 1300.0, 2.7, 1.40, 1.30, 0.45, 0.40, 0.85, 2.0, -10.0
    q = aero.dynamic_pressure(1.225, 50.0)
    D = q * CDA
    static_f, static_r = M * G0 * C / L, M * G0 * B / L
    free_f, free_r = q * CLA * 0.40, q * CLA * 0.60
    X = M * AX + D  # net longitudinal ground force
    # (A) drag-free split + inertial transfer + drag pitch D h_a / L
    fa = static_f + free_f - M * AX * H / L - D * HA / L
    ra = static_r + free_r + M * AX * H / L + D * HA / L
    # (B) CG convention + ground-force transfer X h / L (docs/method.md, axle loads)
    cf, cr = aero.to_cg_convention(free_f, free_r, D, H, L, "restraint", HA)
    fb = static_f + cf - X * H / L
    rb = static_r + cr + X * H / L
    # (C) ground convention (wheel-restrained / J1594) + inertial transfer m a_x h / L
    gf, gr = aero.from_cg_convention(cf, cr, D, H, L, "ground")
    fc = static_f + gf - M * AX * H / L
    rc = static_r + gr + M * AX * H / L
    return ((fa, ra), (fb, rb), (fc, rc)), X


_T = "test_aero.py::test_axle_loads_three_bookkeepings_agree"
_S3 = f"{GILLESPIE}, ch. 1 statics, per-part breakdown (our derivation)"
_case("aero.bookkeeping.ground_force", T_AERO,
      f"net longitudinal ground force X = m a_x + D ({_B1})", _S3, -11698.4375, "N", _T,
      lambda: three_bookkeepings()[1], rel=1e-9)
for _j, _name in enumerate(("inertial", "cg_convention", "ground_convention")):
    _case(f"aero.bookkeeping.{_name}.front", T_AERO,
          f"front axle load, {_name.replace('_', ' ')} book-keeping ({_B1})", _S3, 9337.0791,
          "N", _T, (lambda j=_j: three_bookkeepings()[0][j][0]), rel=1e-8)
    _case(f"aero.bookkeeping.{_name}.rear", T_AERO,
          f"rear axle load, {_name.replace('_', ' ')} book-keeping ({_B1})", _S3, 6474.0659,
          "N", _T, (lambda j=_j: three_bookkeepings()[0][j][1]), rel=1e-8)
    _case(f"aero.bookkeeping.{_name}.sum", T_AERO,
          f"sum of axle loads, {_name.replace('_', ' ')} book-keeping ({_B1})", _S3,
          15811.1450, "N", _T, (lambda j=_j: sum(three_bookkeepings()[0][j])), rel=1e-8)


@cache
def tunnel_worked_example():
    """(measured front [N], corrected reading) of the wheel-restrained worked example."""
    f, r, d = tunnel.reading_from_axle_coefficients(-1.20, -1.80, 1.00, 1.5, 1.225, 50.0)
    # with the CG at the drag height the corrected split is the drag-free split
    res = tunnel.correct_reading(f, r, d, cg_height=0.35, wheelbase=3.0, drag_height=0.35)
    return f, res


_T = "test_tunnel.py::test_worked_example_wheel_restrained"
_TX = f"{_WX}, v = 50 m/s, ρ = 1.225 kg/m³, h_cg = h_D"
_case("tunnel.worked.front_measured", T_AERO, f"front downforce as measured ({_TX})", _SW,
      2756.2500, "N", _T, lambda: tunnel_worked_example()[0], rel=1e-7)
_case("tunnel.worked.correction", T_AERO, f"correction D (h_cg − z)/L ({_TX})", _SW, 267.9688,
      "N", _T, lambda: tunnel_worked_example()[1].correction, rel=1e-6)
_case("tunnel.worked.front_corrected", T_AERO, f"front downforce, drag-free ({_TX})", _SW,
      3024.2188, "N", _T, lambda: tunnel_worked_example()[1].front, rel=1e-6)
_case("tunnel.worked.balance_measured", T_AERO, f"front share as measured ({_TX})", _SW, 0.4,
      "-", _T, lambda: tunnel_worked_example()[1].measured_balance_front, rel=1e-6)
_case("tunnel.worked.balance_corrected", T_AERO, f"front share, drag-free ({_TX})", _SW,
      0.438889, "-", _T, lambda: tunnel_worked_example()[1].balance_front, rel=1e-5)


# ============================================================================================
# Steady-state handling (single-track model, linear range)
# ============================================================================================

T_HANDLING = "Steady-state handling figures"
C_AF, C_AR = 2400.0, 2800.0  # axle cornering stiffnesses of the Gillespie ch. 6 example [N/deg]
_GH = (f"{GILLESPIE}, ch. 6, steady-state cornering of the bicycle model (evaluated for "
       "m = 1200 kg, front axle to CG 1.2 m, L = 2.6 m, C_αf = 2400, C_αr = 2800 N/deg)")


def _handling():
    return _handling_mod


@cache
def gillespie_ch6_car():
    return make_car()


def gillespie_k():
    return _handling().understeer_gradient(gillespie_ch6_car(), C_AF, C_AR)


_T = "test_handling.py::test_gillespie_ch6_understeer_gradient"
_case("handling.static_weight.front", T_HANDLING, "static front axle weight W_f", _GH,
      6336.6046, "N", _T, lambda: _handling().static_axle_weights(gillespie_ch6_car())[0],
      rel=1e-7)
_case("handling.static_weight.rear", T_HANDLING, "static rear axle weight W_r", _GH, 5431.3754,
      "N", _T, lambda: _handling().static_axle_weights(gillespie_ch6_car())[1], rel=1e-7)
_case("handling.understeer_gradient", T_HANDLING,
      "understeer gradient K = W_f/C_αf − W_r/C_αr", _GH, 0.700475, "deg/g", _T, gillespie_k,
      rel=1e-5)
_T = "test_handling.py::test_gillespie_ch6_steer_and_characteristic_speed"
_case("handling.ackermann", T_HANDLING, "Ackermann steer 57.3 L/R at R = 100 m", _GH, 1.489690,
      "deg", _T, lambda: _handling().steer_angle(2.6, 100.0, 0.0, 0.5 * G0), rel=1e-6)
_case("handling.steer", T_HANDLING, "road-wheel steer at R = 100 m, a_y = 0.5 g", _GH, 1.839928,
      "deg", _T, lambda: _handling().steer_angle(2.6, 100.0, gillespie_k(), 0.5 * G0),
      rel=1e-6)
_case("handling.characteristic_speed", T_HANDLING,
      "characteristic speed √(57.3 L g/K)", _GH, 45.6680, "m/s", _T,
      lambda: _handling().characteristic_speed(2.6, gillespie_k()), rel=1e-5)
_case("handling.critical_speed", T_HANDLING,
      "critical speed √(−57.3 L g/K) for the same |K| with oversteer", _GH, 45.6680, "m/s", _T,
      lambda: _handling().critical_speed(2.6, -gillespie_k()), rel=1e-5)


@cache
def constant_radius_run_fit():
    run = _handling().constant_radius_run(gillespie_ch6_car(), 100.0,
                                          cornering_stiffness_front=C_AF,
                                          cornering_stiffness_rear=C_AR)
    slope, icpt = np.polyfit(run.ay_mps2 / G0, run.steer_deg, 1)
    return run, slope, icpt


_T = "test_handling.py::test_constant_radius_run_steer_slope_is_the_gillespie_gradient"
_case("handling.run.slope", T_HANDLING,
      "steer-vs-a_y slope of the constant-radius run (R = 100 m) = K", _GH, 0.700475, "deg/g",
      _T, lambda: constant_radius_run_fit()[1], rel=1e-5)
_case("handling.run.intercept", T_HANDLING,
      "steer at zero a_y of the constant-radius run = Ackermann", _GH, 1.489690, "deg", _T,
      lambda: constant_radius_run_fit()[2], rel=1e-6)
_case("handling.run.steer_half_g", T_HANDLING, "steer of the run at a_y = 0.5 g", _GH,
      1.839928, "deg", _T,
      lambda: np.interp(0.5 * G0, constant_radius_run_fit()[0].ay_mps2,
                        constant_radius_run_fit()[0].steer_deg), rel=1e-6)
_case("handling.run.limit_mu_g", T_HANDLING,
      "limit lateral acceleration, no aero, load-independent μ = 1.4",
      "Coulomb friction and Newton's second law: a_y,max = μ g (closed form)", 1.4 * G0, "m/s²",
      "test_handling.py::test_constant_radius_limit_is_mu_g_without_aero_or_load_sensitivity",
      lambda: _handling().constant_radius_run(gillespie_ch6_car(), 100.0).limit_ay_mps2,
      rel=1e-4)


# ============================================================================================
# Lap solver
# ============================================================================================

T_LAP = "Lap solver against closed forms"


def _simulate(car, track, **kw):
    return simulate_lap(car, track, assess_liftoff=False, **kw)


@cache
def circle_lap(mu, radius):
    car = make_car(tyres={"front": {"peak_friction": mu}, "rear": {"peak_friction": mu}})
    return _simulate(car, circle(radius))


_T = "test_lap_reference.py::test_circle_without_aero_reaches_sqrt_mu_g_r"
_SC = "point-mass cornering limit m v²/R = μ m g, v = √(μ g R) (closed form)"
for _mu, _r in ((1.0, 50.0), (1.4, 120.0)):
    _v = math.sqrt(_mu * G0 * _r)
    _case(f"lap.circle.mu{_mu:g}_r{_r:g}.speed", T_LAP,
          f"speed at every step of a circle, R = {_r:g} m, μ = {_mu:g}, no aero "
          "(worst step shown)", _SC, _v, "m/s", _T,
          (lambda mu=_mu, r=_r, v=_v: _worst(circle_lap(mu, r).channels["speed_mps"], v)),
          rel=5e-3)
    _case(f"lap.circle.mu{_mu:g}_r{_r:g}.lap_time", T_LAP,
          f"lap time of a circle, R = {_r:g} m, μ = {_mu:g}: 2πR/v", _SC,
          2 * math.pi * _r / _v, "s", _T,
          (lambda mu=_mu, r=_r: circle_lap(mu, r).lap_time_s), rel=5e-3)


@cache
def downforce_circle_lap(mu, m, radius, cla):
    car = make_car(chassis={"mass_kg": m},
                   aero={"downforce_area_m2": cla, "balance_front": 1.4 / 2.6},
                   tyres={"front": {"peak_friction": mu}, "rear": {"peak_friction": mu}},
                   powertrain={"gear_ratios": [1.0], "wheel_radius_m": 0.3})
    return _simulate(car, circle(radius))


_T = "test_lap_reference.py::test_circle_with_downforce_matches_closed_form"
DOWNFORCE_CIRCLES = ((1.4, 1300.0, 100.0, 2.0, 39.7691), (1.4, 1300.0, 50.0, 2.0, 27.1098),
                     (1.6, 620.0, 50.0, 3.510204, 32.9505))
for _mu, _m, _r, _cla, _e in DOWNFORCE_CIRCLES:
    _case(f"lap.downforce_circle.m{_m:g}_r{_r:g}", T_LAP,
          f"speed at every step of a circle with downforce, R = {_r:g} m, m = {_m:g} kg, "
          f"μ = {_mu:g}, ClA = {_cla:g} m², balance = weight split (worst step shown)",
          "m v²/R = μ (m g + ½ ρ ClA v²) (closed form; critical-radius idea of Lenzo & "
          "Rossi, *Applied Sciences* 10(4):1498, 2020)", _e, "m/s", _T,
          (lambda a=(_mu, _m, _r, _cla), e=_e: _worst(
              downforce_circle_lap(*a).channels["speed_mps"], e)), rel=5e-3)


@cache
def power_straight():
    """(lap result, solve_ivp speed at the lap's steps) for the 1.5 km constant-power run."""


    P, m, cda, crr, rho = 300e3, 1300.0, 0.85, 0.015, 1.225
    car = make_car(chassis={"mass_kg": m}, aero={"drag_area_m2": cda},
                   tyres={"rolling_resistance": crr, "front": {"peak_friction": 3.0},
                          "rear": {"peak_friction": 3.0}},
                   powertrain={"power_kw": P / 1e3})
    v0 = 25.0
    r = _simulate(car, straight(1500.0), start_speed_kph=v0 * 3.6)

    def rhs(s, y):
        v = y[0]
        return [(P / v - 0.5 * rho * cda * v * v - crr * m * G0) / (m * v)]

    sol = solve_ivp(rhs, (0, 1500.0), [v0], rtol=1e-10, atol=1e-10, dense_output=True)
    return r, sol.sol(r.channels["distance_m"])[0]


def _worst_ratio(values, ref):
    """values / ref at the step where they differ most (relative)."""
    v, ref = np.asarray(values, float), np.asarray(ref, float)
    i = int(np.argmax(np.abs(v / ref - 1.0)))
    return float(v[i] / ref[i])


_case("lap.power_straight", T_LAP,
      "speed / ODE speed on a 1.5 km straight at 300 kW, m = 1300 kg, CdA 0.85, Crr 0.015, "
      "from 25 m/s (worst step shown)",
      "scipy.integrate.solve_ivp of m v dv/ds = P/v − ½ ρ CdA v² − Crr m g (reference "
      "library; road-load equation)", 1.0, "-",
      "test_lap_reference.py::test_straight_constant_power_matches_solve_ivp",
      lambda: _worst_ratio(power_straight()[0].channels["speed_mps"], power_straight()[1]),
      rel=5e-3)


def top_speed_root():
    P, m, cda, crr, rho = 400e3, 1300.0, 0.85, 0.015, 1.225
    return brentq(lambda v: (0.5 * rho * cda * v * v + crr * m * G0) * v - P, 1.0, 500.0)


@cache
def top_speed_lap():
    car = make_car(chassis={"mass_kg": 1300.0}, aero={"drag_area_m2": 0.85},
                   tyres={"rolling_resistance": 0.015, "front": {"peak_friction": 3.0},
                          "rear": {"peak_friction": 3.0}},
                   powertrain={"power_kw": 400.0})
    return _simulate(car, straight(20000.0, ds=2.0), start_speed_kph=80.0 * 3.6)


_T = "test_lap_reference.py::test_top_speed_matches_power_balance_root"
_ST = ("power balance P = (½ ρ CdA v² + Crr m g) v (road-load equation), root by "
       "scipy.optimize.brentq")
_case("lap.top_speed.root", T_LAP,
      "top speed root, P = 400 kW, CdA 0.85 m², Crr 0.015, m = 1300 kg", _ST, 90.2527, "m/s", _T,
      top_speed_root, rel=1e-6)
_case("lap.top_speed.lap", T_LAP, "highest speed on a 20 km straight, same car", _ST, 90.2527,
      "m/s", _T, lambda: top_speed_lap().channels["speed_mps"].max(), rel=5e-3)

_SBB = (f"{GILLESPIE}, ch. 3, brake proportioning: a_rear-lock = μ g (b/L)/((1 − β) + μ h/L) "
        "(our derivation of the lock limits; μ = 1.4, front axle to CG 1.2 m, L = 2.6 m, "
        "h = 0.5 m)")
BRAKE_BIAS = ((0.55, 8.81025), (0.60, 9.46849), (0.65, 10.23303), (0.70, 11.13187))


@cache
def brake_limits(bias):
    return limits_at(make_car(brakes={"bias_front": bias}), 30.0)


@cache
def brake_zone(bias):
    """(lap, mask of the straight braking zone) into a 15 m hairpin."""
    car = make_car(brakes={"bias_front": bias})
    k = np.concatenate([np.zeros(600), np.full(80, 1 / 15.0), np.zeros(50)])
    r = _simulate(car, analytic_track(k), start_speed_kph=150.0)
    brk = r.channels["brake_force_n"] > 0
    zone = brk & (r.channels["curvature_1pm"] == 0)
    zone[np.argmax(zone)] = False  # the step where the acceleration and braking traces meet
    return r, zone


_T = "test_lap_reference.py::test_braking_with_fixed_bias_matches_lock_limits"
for _b, _e in BRAKE_BIAS:
    _case(f"lap.brake_bias.{_b:g}.limit", T_LAP,
          f"largest deceleration with front brake bias {_b:g} (level road, no aero)", _SBB, _e,
          "m/s²", _T, (lambda b=_b: brake_limits(b)["max_decel_mps2"]), rel=5e-3)
    _case(f"lap.brake_bias.{_b:g}.zone", T_LAP,
          f"deceleration at every step of a straight braking zone, bias {_b:g} (worst step "
          "shown)", _SBB, _e, "m/s²", _T,
          (lambda b=_b, e=_e: _worst(-brake_zone(b)[0].channels["ax_mps2"][brake_zone(b)[1]],
                                     e)), rel=5e-3)

_case("lap.rwd_traction", T_LAP,
      "rear-drive traction limit, level road, no aero (μ = 1.4, front axle to CG 1.2 m, "
      "L = 2.6 m, h = 0.5 m)",
      f"a = μ g (b/L)/(1 − μ h/L), {GILLESPIE}, ch. 2, traction-limited acceleration "
      "(our derivation)", 8.67114, "m/s²", "test_lap_reference.py::test_rwd_traction_limit",
      lambda: limits_at(gillespie_ch6_car(), 10.0)[
          "max_accel_mps2"], rel=5e-3)


@cache
def meeting_point():
    """(a_acc, v_meet closed form, peak of the lap trace) between two slow corners."""
    car = make_car(powertrain={"power_kw": 3000.0, "max_tractive_force_n": 1200.0 * 5.0},
                   tyres={"front": {"peak_friction": 3.0}, "rear": {"peak_friction": 3.0}},
                   brakes={"bias_front": 0.6})
    lim = limits_at(car, 40.0)
    a_acc, a_brk = lim["max_accel_mps2"], lim["max_decel_mps2"]
    R1, R2 = 20.0 ** 2 / (3.0 * G0), 25.0 ** 2 / (3.0 * G0)
    k = np.concatenate([np.full(40, 1 / R1), np.zeros(401), np.full(40, 1 / R2)])
    r = _simulate(car, analytic_track(k), start_speed_kph=20 * 3.6)
    v1 = r.channels["speed_mps"][40]
    v2 = r.channels["speed_mps"][440]
    s = 400.0
    vm = math.sqrt((v1 ** 2 * a_brk + v2 ** 2 * a_acc + 2 * a_acc * a_brk * s)
                   / (a_acc + a_brk))
    return a_acc, vm, float(r.channels["speed_mps"][40:441].max())


_T = "test_lap_reference.py::test_forward_backward_meeting_point_on_straight"
_SM = ("constant-acceleration kinematics: v_m² = (v1² a_brk + v2² a_acc + 2 a_acc a_brk s)"
       "/(a_acc + a_brk) (closed form; the forward/backward passes of Lenzo & Rossi, "
       "*Applied Sciences* 10(4):1498, 2020)")
_case("lap.meeting.traction_cap", T_LAP,
      "acceleration at the 6 kN tractive-force cap, m = 1200 kg: F/m", "Newton's second law",
      5.0, "m/s²", _T, lambda: meeting_point()[0], rel=1e-6)
_case("lap.meeting.peak_speed", T_LAP,
      "peak speed on a 400 m straight between two corners / kinematic meeting speed", _SM, 1.0,
      "-", _T, lambda: meeting_point()[2] / meeting_point()[1], rel=5e-3)


# ============================================================================================
# Lift-off
# ============================================================================================

T_LIFTOFF = "Lift-off check"


@cache
def rwd_liftoff_states():
    """(on, off) states of the rear-drive lift-off worked example at 30 m/s on R = 100 m."""
    # drag and rolling resistance booked as one resistance acting at the ground with no drag
    # pitch: a zero-lift aero split in the ground convention, drag area giving 527.091 N
    resist = 385.875 + 141.216
    cda = resist / (0.5 * 1.225 * 30.0 ** 2)
    car = make_car(aero={"drag_area_m2": cda, "balance_convention": "ground",
                         "downforce_area_m2": 0.0},
                   tyres={"front": {"peak_friction": 1.3}, "rear": {"peak_friction": 1.3}},
                   powertrain={"overrun_torque_nm": 800.0 * 0.3},
                   suspension={"roll_centre_height_front_m": 0.0,
                               "roll_centre_height_rear_m": 0.0})
    on = steady_state(car, 30.0, curvature=1 / 100.0)
    off = evaluate_forces(car, 30.0, curvature=1 / 100.0, drive_n=-800.0)
    return on, off


_SLO = (f"{GILLESPIE}, ch. 1 axle loads with the friction ellipse per axle, evaluated for the "
        "power-off situation of ISO 9816:2018 (our worked example: m = 1200 kg, front axle to "
        "CG 1.2 m, L = 2.6 m, h = 0.5 m, rear drive, v = 30 m/s, R = 100 m, μ = 1.3, "
        "resistance 527.091 N, overrun 800 N)")
_T = "test_liftoff.py::test_reference_rwd_liftoff_balance_change"
for _k, _st, _q, _e, _tol, _u in (
        ("on.usage_front", 0, "uf", 0.705957, 1e-5, "-"),
        ("on.usage_rear", 0, "ur", 0.709893, 1e-5, "-"),
        ("off.ax", 1, "ax", -1.10591, 1e-5, "m/s²"),
        ("off.fz_front", 1, "fzf", 6591.814, 1e-6, "N"),
        ("off.usage_front", 1, "uf", 0.678625, 1e-5, "-"),
        ("off.usage_rear", 1, "ur", 0.750244, 1e-5, "-")):
    _case(f"liftoff.rwd.{_k}", T_LIFTOFF,
          f"{'after lift-off' if _st else 'on throttle'}: {_k.split('.')[1].replace('_', ' ')}",
          _SLO, _e, _u, _T, (lambda st=_st, q=_q: rwd_liftoff_states()[st][q]), rel=_tol)
_case("liftoff.rwd.balance_shift", T_LIFTOFF, "balance index change (u_r − u_f) on lift-off",
      _SLO, 0.067683, "-", _T,
      lambda: ((rwd_liftoff_states()[1]["ur"] - rwd_liftoff_states()[1]["uf"])
               - (rwd_liftoff_states()[0]["ur"] - rwd_liftoff_states()[0]["uf"])), rel=1e-4)


# ============================================================================================
# Lift-off margin
# ============================================================================================

T_MARGIN = "Lift-off margin"
RHO_STD = 1.225


def closed_form_margin_car(balance_front=0.5, downforce=2.0, drag=1.0, mu=1.4):
    """Test car of the margin closed form: constant friction, no overrun, no rolling
    resistance, CG-convention split (front axle to CG 0.55 L, h = 0.55 m)."""
    return make_car(chassis={"front_weight_fraction": 0.45, "cg_height_m": 0.55},
                    aero={"downforce_area_m2": downforce, "drag_area_m2": drag,
                          "balance_front": balance_front, "balance_convention": "cg"},
                    tyres={"rolling_resistance": 0.0,
                           "front": {"peak_friction": mu, "load_sensitivity": 0.0},
                           "rear": {"peak_friction": mu, "load_sensitivity": 0.0}},
                    powertrain={"overrun_torque_nm": 0.0})


def closed_form_margin(m, L, wf, h, cla_f, cla_r, cda, mu, R):
    """(lambda, v_limit², v_safe²) of the margin closed form (our derivation; the formulas and
    their sources are in the docstring of test_liftoff_margin.test_margin_matches_closed_form
    and in docs/method.md, the lift-off margin)."""
    a = (1 - wf) * L  # front axle to CG
    b = wf * L  # CG to rear axle
    k = 0.5 * RHO_STD
    den_s = 1.0 / R - mu * k * cla_r * L / (m * a)
    vs2 = math.inf if den_s <= 0 else mu * G0 / den_s
    den_f = 1.0 / R - mu * k * (cla_f - cda * h / L) * L / (m * b)
    vf2 = math.inf if den_f <= 0 else mu * G0 / den_f
    A = m * G0 * a / L
    B = k * (cla_r + cda * h / L)
    c = k * cda
    e = m * a / (L * R)
    den_r = math.hypot(c, e) - mu * B
    vr2 = math.inf if den_r <= 0 else mu * A / den_r
    vl2 = min(vf2, vr2)
    return min(1.0, vs2 / vl2), vl2, vs2


@cache
def margin_circle_lap(balance_front):
    """Lap of the margin closed-form car on a 150 m circle (lift-off assessment off)."""
    return simulate_lap(closed_form_margin_car(balance_front), circle(150.0),
                        assess_liftoff=False)


_SMG = (f"{GILLESPIE}, ch. 1 axle loads with the friction ellipse per axle ({RCVD}, ch. 2), "
        "coasting lift on a flat circle, constant μ (our derivation of the closed form)")
_MX = ("R = 150 m, m = 1200 kg, L = 2.6 m, front axle to CG 0.55 L, h = 0.55 m, μ = 1.4, "
       "ClA = 2.0 m², CdA = 1.0 m², rear drive, no overrun, no rolling resistance")
_T = "test_liftoff_margin.py::test_margin_matches_closed_form"
for _f, _lam, _vl, _vs, _res in ((0.62, 0.96292522, 50.105208, 49.167616, -0.03261355),
                                 (0.5, 1.0, 50.354746, None, None)):
    _p = f"margin.closed_form.f{_f:g}"
    _x = f"{_MX}, CG-convention front share {_f:g}"
    _case(f"{_p}.limit_speed", T_MARGIN, f"steady limit speed ({_x})", _SMG, _vl, "m/s", _T,
          (lambda f=_f: margin_circle_lap(f).channels["speed_limit_mps"][0]), rel=5e-5)
    _case(f"{_p}.margin", T_MARGIN, f"margin λ = a_y,safe/a_y,limit, worst step ({_x})", _SMG,
          _lam, "-", _T, (lambda f=_f, e=_lam: _worst(
              margin_circle_lap(f).channels["liftoff_step_margin"], e)), abs=1e-4)
    _case(f"{_p}.coast_margin", T_MARGIN, f"coasting margin, worst step ({_x})", _SMG, _lam,
          "-", _T, (lambda f=_f, e=_lam: _worst(
              margin_circle_lap(f).channels["coast_step_margin"], e)), abs=1e-4)
    if _vs is not None:
        _case(f"{_p}.safe_speed", T_MARGIN, f"safe speed, worst step ({_x})", _SMG, _vs,
              "m/s", _T, (lambda f=_f, e=_vs: _worst(
                  margin_circle_lap(f).channels["liftoff_safe_speed_mps"], e)), rel=5e-5)
        _case(f"{_p}.rear_reserve", T_MARGIN,
              f"rear reserve 1 − u_r after a lift at the limit, worst step ({_x})", _SMG,
              _res, "-", _T, (lambda f=_f, e=_res: _worst(
                  margin_circle_lap(f).channels["liftoff_step_rear_reserve"], e)), abs=1e-4)


# ============================================================================================
# Transient single-track model
# ============================================================================================

T_TRANSIENT = "Transient single-track model"

#: The linear check car (textbook-style numbers): m = 1200 kg, I_z = 1800 kg m², front axle
#: to CG a = 1.1 m, b = 1.5 m, C_f = 80 kN/rad, C_r = 90 kN/rad, no tyre lag.
TR_LIN = {"yaw_inertia_kgm2": 1800.0, "cornering_stiffness_front_n_per_rad": 80000.0,
          "cornering_stiffness_rear_n_per_rad": 90000.0, "relaxation_length_m": 0.0,
          "steering_ratio": 15.0}


def lin_car(**tr):
    """The linear check car (``tr`` overrides its [transient] keys)."""
    return make_car(chassis={"front_weight_fraction": 1.5 / 2.6}, transient={**TR_LIN, **tr})


def straight_step(car, speed, delta, t_end, dt=0.002, y0=None):
    """Integrate from straight running at ``speed`` [m/s] with the road wheels steered by
    ``delta`` [rad], no drive force; returns the history array."""
    from lapbalance import transient as _tr
    from lapbalance import transient_kernels as tk

    mdl = _tr.model_parameters(car)
    q = mdl.q.copy()
    q[tk.Q_DELTA] = delta
    q[tk.Q_F0] = q[tk.Q_F1] = 0.0
    q[tk.Q_R0] = 1e9
    if y0 is None:
        y0 = np.zeros(tk.NY)
        y0[tk.Y_VX] = speed
    n = int(round(t_end / dt))
    hist = np.empty((n + 1, tk.NH))
    status, rows = tk.integrate(y0, q, mdl.p, dt, n, 1.0, 0.1, hist)
    assert status == tk.RUN_OK and rows == n + 1
    return hist


@cache
def linear_figures(speed, deg_stiffness=False):
    from lapbalance import transient as _tr

    if deg_stiffness:
        car = make_car(transient={**TR_LIN, "cornering_stiffness_front_n_per_rad": None,
                                  "cornering_stiffness_rear_n_per_rad": None,
                                  "cornering_stiffness_front_n_per_deg": 2400.0,
                                  "cornering_stiffness_rear_n_per_deg": 2800.0})
    else:
        car = lin_car()
    return _tr.linear_model(car, speed)


@cache
def step_yaw_gain(speed, relaxation_length=0.0, t_end=6.0):
    """Settled yaw rate / steer of the linear check car after a 1e-4 rad steer step [1/s]."""
    from lapbalance import transient_kernels as tk

    h = straight_step(lin_car(relaxation_length_m=relaxation_length), speed, 1e-4, t_end)
    return float(h[-1, tk.H_Y + tk.Y_R] / 1e-4)


@cache
def yaw_mode_from_response(u=40.0):
    """(natural frequency [Hz], damping ratio) identified from the integrated free response of
    the linear check car at ``u`` [m/s]: r[k+2] = c1 r[k+1] + c2 r[k] (two-state linear
    response sampled at Δ), roots → eigenvalues."""
    from lapbalance import transient_kernels as tk

    y0 = np.zeros(tk.NY)
    y0[tk.Y_VX] = u
    y0[tk.Y_R] = 1e-4
    h = straight_step(lin_car(), u, 0.0, 1.0, dt=0.001, y0=y0)
    step = 20
    r = h[::step, tk.H_Y + tk.Y_R][:40]
    M = np.column_stack([r[1:-1], r[:-2]])
    c1, c2 = np.linalg.lstsq(M, r[2:], rcond=None)[0]
    mu = np.roots([1.0, -c1, -c2])
    lam = np.log(mu.astype(complex)) / (step * 0.001)
    wn = abs(lam[0])
    return float(wn / (2 * math.pi)), float(-lam[0].real / wn)


_SG6 = f"{GILLESPIE}, ch. 6 (bicycle model)"
_SLIN = (f"{_SG6}; {RCVD}, ch. 5; Pacejka, *Tire and Vehicle Dynamics*, ch. 1 (formula "
         "evaluated)")
_XG = ("m = 1200 kg, front axle to CG 1.2 m, L = 2.6 m, C_αf = 2400 N/deg, C_αr = 2800 N/deg")
_T = "test_transient.py::test_gillespie_understeer_gradient_and_characteristic_speed"
_case("transient.gillespie.understeer_gradient", T_TRANSIENT,
      f"understeer gradient K = W_f/C_αf − W_r/C_αr ({_XG})", f"{_SG6}, formula evaluated",
      0.700475, "deg/g", _T,
      lambda: linear_figures(20.0, True)["understeer_gradient_deg_per_g"], rel=5e-6)
_case("transient.gillespie.characteristic_speed", T_TRANSIENT,
      f"characteristic speed √(57.3 L g/K) ({_XG})", f"{_SG6}, formula evaluated", 45.6680,
      "m/s", _T, lambda: linear_figures(20.0, True)["characteristic_speed_mps"], rel=5e-6)

_XL = ("m = 1200 kg, a = 1.1 m, b = 1.5 m, C_f = 80 kN/rad, C_r = 90 kN/rad, "
       "I_z = 1800 kg m²")
_T = "test_transient.py::test_linear_closed_forms_textbook_case"
_case("transient.linear.understeer_gradient", T_TRANSIENT,
      f"K = (m/L)(b/C_f − a/C_r) ({_XL})", _SLIN, 3.01282e-3, "rad/(m/s²)", _T,
      lambda: linear_figures(25.0)["understeer_gradient_rad_per_mps2"], rel=5e-6)
_case("transient.linear.yaw_gain_25", T_TRANSIENT,
      f"steady yaw-rate gain u/(L + K u²) at u = 25 m/s ({_XL})", _SLIN, 5.57661, "1/s", _T,
      lambda: linear_figures(25.0)["yaw_gain_per_s"], rel=5e-6)
_case("transient.linear.characteristic_speed", T_TRANSIENT,
      f"characteristic speed √(L/K) ({_XL})", _SLIN, 29.377, "m/s", _T,
      lambda: linear_figures(25.0)["characteristic_speed_mps"], rel=5e-5)

_T = "test_transient.py::test_yaw_rate_gain_from_a_small_steer_step"
for _v, _e in ((10.0, 3.44675210), (20.0, 5.25606469), (35.0, 5.56376420)):
    _case(f"transient.step_gain.{_v:g}", T_TRANSIENT,
          f"settled yaw rate / steer after a 1e-4 rad step at {_v:g} m/s, no tyre lag ({_XL})",
          f"{_SG6}, yaw-velocity gain u/(L + K u²) (formula evaluated)", _e, "1/s", _T,
          (lambda v=_v: step_yaw_gain(v)), rel=1e-5)
_case("transient.step_gain.characteristic", T_TRANSIENT,
      f"settled yaw gain at the characteristic speed 29.3765 m/s, σ = 0.4 m ({_XL})",
      f"{_SG6}: L + K v_ch² = 2L, gain v_ch/(2L)", 5.64932683, "1/s",
      "test_transient.py::test_yaw_gain_at_the_characteristic_speed_is_half_the_neutral_gain",
      lambda: step_yaw_gain(math.sqrt(2.6 / 3.01282051e-3), 0.4, 8.0), rel=1e-5)

_SEV = (f"eigenvalues of the (v_y, r) state matrix, Pacejka, *Tire and Vehicle Dynamics*, "
        f"ch. 1; {RCVD}, ch. 5 (evaluated by numpy.linalg.eigvals)")
_T = "test_transient.py::test_yaw_mode_from_the_integrated_response_matches_the_eigenvalues"
_case("transient.yaw_mode.frequency.closed_form", T_TRANSIENT,
      f"yaw-mode natural frequency at 40 m/s, tool's linear model ({_XL})", _SEV,
      1.00902783, "Hz", _T, lambda: linear_figures(40.0)["natural_frequency_hz"], rel=1e-7)
_case("transient.yaw_mode.damping.closed_form", T_TRANSIENT,
      f"yaw-mode damping ratio at 40 m/s, tool's linear model ({_XL})", _SEV, 0.60715471, "-",
      _T, lambda: linear_figures(40.0)["damping_ratio"], rel=1e-7)
_case("transient.yaw_mode.frequency.integrated", T_TRANSIENT,
      f"yaw-mode natural frequency identified from the integrated free response ({_XL})",
      _SEV, 1.00902783, "Hz", _T, lambda: yaw_mode_from_response()[0], rel=1e-5)
_case("transient.yaw_mode.damping.integrated", T_TRANSIENT,
      f"yaw-mode damping ratio identified from the integrated free response ({_XL})", _SEV,
      0.60715471, "-", _T, lambda: yaw_mode_from_response()[1], rel=1e-5)


# ============================================================================================
# Track geometry
# ============================================================================================

T_TRACK = "Track geometry"


def circle_points(radius, spacing, rounding, centre=(1234.567, -987.65)):
    """Points every ``spacing`` [m] on a circle, coordinates rounded to ``rounding`` [m]."""
    n = int(round(2.0 * math.pi * radius / spacing))
    t = np.arange(n) * (2.0 * math.pi / n)
    x = centre[0] + radius * np.cos(t)
    y = centre[1] + radius * np.sin(t)
    return np.round(x / rounding) * rounding, np.round(y / rounding) * rounding


@cache
def circle_track(radius, spacing, rounding):
    from lapbalance.track import make_track

    return make_track(*circle_points(radius, spacing, rounding))


def circle_curvature_rms_error(radius, spacing, rounding):
    """RMS over the steps of κ R − 1 of a fitted circle [-]."""
    err = circle_track(radius, spacing, rounding).curvature_1pm * radius - 1.0
    return math.sqrt(float(np.mean(err ** 2)))


CLOTHOID = (80.0, 120.0, 150.0)  # end radius R, spiral length Lc, lead-in straight [m]


@cache
def clothoid_track(spacing, rounding):
    """(track, distance from the spiral start, mask of its inner 70 %, exact curvature there)
    of straight - clothoid (0 to 1/R over Lc) - quarter arc of R, spaced and rounded."""
    from scipy.special import fresnel

    from lapbalance.track import make_track

    R, Lc, straight_m = CLOTHOID
    arc = 0.5 * math.pi * R
    a = math.sqrt(R * Lc)
    scale = a * math.sqrt(math.pi)
    s_c = np.arange(0.0, Lc, spacing)
    S, C = fresnel(s_c / scale)
    xc, yc = scale * C, scale * S
    th_e = Lc / (2.0 * R)  # heading at the end of the spiral
    ex, ey = scale * fresnel(Lc / scale)[1], scale * fresnel(Lc / scale)[0]
    s_a = np.arange(spacing, arc, spacing)
    cx, cy = ex - R * math.sin(th_e), ey + R * math.cos(th_e)  # centre of the arc
    xa = cx + R * np.sin(th_e + s_a / R)
    ya = cy - R * np.cos(th_e + s_a / R)
    xs = np.arange(-straight_m, 0.0, spacing)
    x = np.concatenate([xs, xc, xa])
    y = np.concatenate([np.zeros_like(xs), yc, ya])
    x, y = np.round(x / rounding) * rounding, np.round(y / rounding) * rounding
    tr = make_track(x, y, closed=False, step_m=1.0)
    d = tr.distance_m - straight_m
    inner = (d > 0.15 * Lc) & (d < 0.85 * Lc)
    return tr, d, inner, d[inner] / (R * Lc)


def clothoid_curvature_error(spacing, rounding):
    """Largest |κ − s/(R Lc)| over the inner 70 % of the spiral [1/m]."""
    tr, _, inner, exact = clothoid_track(spacing, rounding)
    return float(np.max(np.abs(tr.curvature_1pm[inner] - exact)))


def geodesic_ring(lat0, lon0, radius, spacing):
    """(lat, lon) [deg] of points at geodesic distance ``radius`` [m] from a centre on the
    WGS-84 ellipsoid, about ``spacing`` [m] apart (geographiclib)."""
    from geographiclib.geodesic import Geodesic

    g = Geodesic.WGS84
    n = int(round(2.0 * math.pi * radius / spacing))
    pts = [g.Direct(lat0, lon0, 360.0 * i / n, radius) for i in range(n)]
    return np.array([(p["lat2"], p["lon2"]) for p in pts])


def write_latlon_ring(path, pts):
    """Write a closed lat/lon track file of ``pts`` [deg]."""
    path.write_text("# closed: true\nlat_deg,lon_deg\n"
                    + "\n".join(f"{a:.9f},{b:.9f}" for a, b in pts) + "\n")


@cache
def latlon_ring_track(lat0, lon0):
    """The 600 m geodesic ring about (lat0, lon0) read from a lat/lon file."""
    import tempfile
    from pathlib import Path

    from lapbalance.track import load_track

    with tempfile.TemporaryDirectory() as d:
        p = Path(d) / "ring.csv"
        write_latlon_ring(p, geodesic_ring(lat0, lon0, 600.0, 4.0))
        return load_track(p)


_SCI = ("analytic geometry: a circle of radius R has curvature 1/R and length 2πR (ISO 8855 "
        "sign, left positive)")
_T = "test_track_geometry.py::test_circle_curvature_independent_of_spacing_and_rounding"
for _r in (15.0, 50.0, 300.0, 1000.0):
    _x = f"R = {_r:g} m, points every 1 m rounded to 1 mm"
    _case(f"track.circle.r{_r:g}.curvature", T_TRACK, f"RMS of κ R − 1 over the lap ({_x})",
          _SCI, 0.0, "-", _T, (lambda r=_r: circle_curvature_rms_error(r, 1.0, 1e-3)),
          abs=0.01)
    _case(f"track.circle.r{_r:g}.length", T_TRACK, f"lap length ({_x})", _SCI,
          2.0 * math.pi * _r, "m", _T, (lambda r=_r: circle_track(r, 1.0, 1e-3).length_m),
          rel=1e-3)

_SCL = ("Euler spiral κ(s) = s/(R Lc); positions from the Fresnel integrals, Abramowitz & "
        "Stegun, *Handbook of Mathematical Functions*, 1964, 7.3.1-7.3.2 (scipy.special."
        "fresnel)")
_T = "test_track_geometry.py::test_clothoid_curvature_is_linear_in_arc_length"
for _sp, _rd in ((0.5, 1e-3), (2.0, 1e-2)):
    _x = (f"clothoid 0 → 1/80 m⁻¹ over 120 m after a 150 m straight, then a quarter arc; "
          f"points every {_sp:g} m rounded to {_rd * 1000:g} mm")
    _case(f"track.clothoid.s{_sp:g}.curvature", T_TRACK,
          f"largest |κ − s/(R Lc)| over the inner 70 % of the spiral ({_x})", _SCL, 0.0, "1/m",
          _T, (lambda sp=_sp, rd=_rd: clothoid_curvature_error(sp, rd)), abs=0.02 / 80.0)
    _case(f"track.clothoid.s{_sp:g}.length", T_TRACK, f"track length ({_x})", _SCL,
          150.0 + 120.0 + 0.5 * math.pi * 80.0 - _sp, "m", _T,
          (lambda sp=_sp, rd=_rd: clothoid_track(sp, rd)[0].length_m), rel=2e-3)

_SGL = ("geographiclib (Karney, \"Algorithms for geodesics\", *J. Geodesy* 87, 2013, 43-55): "
        "geodesic length of the polygon of points 600 m from a centre on WGS-84")
_T = "test_track_geometry.py::test_latlon_projection_anywhere"
for _lat, _lon, _tag in ((78.0, 20.0, "high_latitude"), (10.0, 179.999, "antimeridian")):
    _case(f"track.latlon.{_tag}.length", T_TRACK,
          f"length of a lat/lon ring (600 m about {_lat:g}°, {_lon:g}°, points 4 m apart)",
          _SGL, 3769.90419, "m", _T,
          (lambda la=_lat, lo=_lon: latlon_ring_track(la, lo).length_m), rel=1e-4)


# ============================================================================================
# Driving line
# ============================================================================================

T_LINE = "Driving line"


def corner_points(radius, theta_deg, straight_m=600.0, ds=1.0):
    """Exact points of straight - left arc (radius, deflection) - straight, spaced ~ds [m]."""
    th = math.radians(theta_deg)
    n_s = int(round(straight_m / ds))
    n_a = max(int(round(radius * th / ds)), 2)
    pts = [(-straight_m + i * ds, 0.0) for i in range(n_s)]
    for j in range(n_a + 1):
        a = th * j / n_a
        pts.append((radius * math.sin(a), radius * (1.0 - math.cos(a))))
    ex, ey = pts[-1]
    for i in range(1, n_s + 1):
        pts.append((ex + i * ds * math.cos(th), ey + i * ds * math.sin(th)))
    return np.array(pts)


@cache
def solve_corner(radius, theta_deg, e):
    """(offsets [m], three-point curvature of the interior points [1/m], solver info) of the
    minimum-curvature line through an isolated corner with ±e of room."""
    from lapbalance import line as _line

    p = corner_points(radius, theta_deg)
    n = len(p)
    alpha, info = _line.min_curvature_offsets(p[:, 0], p[:, 1], np.full(n, -e), np.full(n, e),
                                              closed=False)
    q = p + alpha[:, None] * _line.normals(p[:, 0], p[:, 1], False)
    k = _line.menger_curvature(q, False)[1:-1]
    return alpha, k, info


def corner_arc_radius(radius, theta_deg, e):
    """Largest constant-radius arc through the corner, R + e (1 + cos θ/2)/(1 − cos θ/2) [m]."""
    c = math.cos(math.radians(theta_deg) / 2)
    return radius + e * (1 + c) / (1 - c)


def corner_apex_radius(radius, theta_deg, e):
    """Small-slope apex radius of the min ∫κ² ds line, 3 D/(2 sin(θ/2) tan(θ/2)) [m]."""
    c, s = math.cos(math.radians(theta_deg) / 2), math.sin(math.radians(theta_deg) / 2)
    d = (radius + e) - (radius - e) * c
    return 3.0 * d / (2.0 * s * (s / c))


@cache
def annulus_line(r0=120.0, w=12.0, car_w=2.0, margin=0.25):
    from lapbalance import line as _line
    from lapbalance.track import make_track

    n = 754
    phi = np.arange(n) * 2 * math.pi / n
    tr = make_track(r0 * np.cos(phi), r0 * np.sin(phi), width=np.full(n, w), closed=True,
                    step_m=1.0)
    return _line.min_curvature_line(tr, car_w, margin)


_SLA = ("plane geometry: the arc tangent to both outer bounds and touching the inner one, "
        "ρ = R + e (1 + cos θ/2)/(1 − cos θ/2) (our derivation)")
_SLB = ("small-slope bending energy: y'''' = 0 between contacts (Euler-Bernoulli beam, e.g. "
        "Timoshenko & Gere, *Mechanics of Materials*), ρ_apex = 3 D/(2 sin(θ/2) tan(θ/2)), "
        "D = (R + e) − (R − e) cos(θ/2) (our derivation; neglects terms of order tan²(θ/2))")
_T = "test_line.py::test_isolated_corner_apex_radius_closed_forms"
for _th in (10.0, 20.0):
    _x = f"R = 200 m, deflection {_th:g}°, e = 5 m, between 600 m straights"
    _case(f"line.corner.t{_th:g}.apex_radius", T_LINE,
          f"apex radius 1/max κ of the min ∫κ² ds line ({_x})", _SLB,
          corner_apex_radius(200.0, _th, 5.0), "m", _T,
          (lambda th=_th: 1.0 / float(solve_corner(200.0, th, 5.0)[1].max())), rel=0.02)
_RA90 = corner_arc_radius(50.0, 90.0, 5.0)  # 79.142 m
_case("line.corner.sharp.apex_radius", T_LINE,
      "apex radius 1/max κ of the min ∫κ² ds line, R = 50 m, 90°, e = 5 m: between the "
      f"centreline radius and the largest arc ρ_arc = {_RA90:.3f} m (expected = the band's "
      "centre, tolerance = its half-width)", _SLA, 0.5 * (50.0 + _RA90), "m",
      "test_line.py::test_sharp_corner_apex_below_largest_arc",
      lambda: 1.0 / float(solve_corner(50.0, 90.0, 5.0)[1].max()), abs=0.5 * (_RA90 - 50.0))

_SAN = ("∫κ² ds = 2π/r on a ring falls as r grows, so the line is the outermost circle the band "
        "allows (closed form)")
_XA = "ring r = 120 m, width 12 m, car 2.0 m wide, margin 0.25 m"
_T = "test_line.py::test_annulus_line_is_outer_edge_minus_margin"
_case("line.annulus.radius", T_LINE, f"line radius, worst point ({_XA})", _SAN, 124.75, "m", _T,
      lambda: _worst(np.hypot(annulus_line().x_m, annulus_line().y_m), 124.75), abs=0.01)
_case("line.annulus.length", T_LINE, f"line length 2π · 124.75 m ({_XA})", _SAN,
      2 * math.pi * 124.75, "m", _T, lambda: annulus_line().length_m, rel=1e-4)

TOPICS = (T_LOADS, T_TYRE, T_AIR, T_AERO, T_HANDLING, T_LAP, T_LIFTOFF, T_MARGIN,
          T_TRANSIENT, T_TRACK, T_LINE)


# ============================================================================================
# The validation table (docs/validation.md)
# ============================================================================================

VALIDATION_DOC = "docs/validation.md"

#: Checks against outside references that assert over many generated inputs (or on files
#: another change is rewriting) and so have no single expected value to tabulate.
NOT_TABULATED = (
    "These tests also check the tool against outside references, over many inputs at once, "
    "so they have no single row here:",
    "",
    "* `test_track.py`: curvature of circles at many radii, spacings and roundings against "
    "1/R, straight lines and constant grades (analytic geometry); latitude/longitude import "
    "against geodesic distances from geographiclib (Karney, *J. Geodesy* 87, 2013).",
    "* `test_aero.py`, `test_tunnel.py`: the ground → CG shift `D h_cg/L` for any drag height, "
    "the CFD force-and-moment route against the SAE J1594 route, and the lever rule for the "
    "centre of pressure, as hypothesis properties.",
    "* `test_loads.py`: vertical-force and roll-moment balance of every load decomposition "
    "(hypothesis), the wheel-lift hand-over and the rollover limit.",
    "* `test_aeromap.py`, `test_lap_aeromap.py`: interpolating-spline and bilinear identities "
    "(Dierckx 1993) and the heave equation of the ride heights.",
    "* `test_robustness.py`: the rev-limited top speed from gearing kinematics, the rigid-car "
    "wheel-lift threshold `a_y = g t/(2h)` (Gillespie 1992, ch. 9) and the force balance of "
    "every step of random laps.",
    "* `test_kernels.py`: compiled kernels against the same code run by Python.",
    "* `test_track_geometry.py`: circles at every spacing and rounding, noisy hairpins and "
    "sweepers against their drawn radius, the noise estimate against the noise drawn, fitted "
    "points on the input circle (analytic geometry); lat/lon rings at the poles and across "
    "the antimeridian against geographiclib.",
    "* `test_transient.py`: the integrator against `scipy.integrate.solve_ivp` (Radau) on a "
    "nonlinear lift-off, the small-step response against `A⁻¹(e^{At} − I) B δ` "
    "(`scipy.linalg.expm`), the steady turns against the lap model's axle usages.",
    "* `test_line.py`: the box solver against `scipy.optimize.lsq_linear` (bounded-variable "
    "least squares, Stark & Parker 1995); the line never leaves the band (hypothesis).",
    "* `test_liftoff_margin.py`: the margin's monotonic properties where the front limits "
    "(hypothesis) and the rear-limited counterexample in closed form.",
    "* `test_speed_consistency.py`: every step's reported a_x equals (v_{i+1}² − v_i²)/(2 ds) "
    "(the solver's kinematics) for every demo car on the demo circuits.",
)


def _fmt_expected(x: float) -> str:
    return f"{x:.10g}"


def _fmt_value(c: Case, v: float) -> str:
    """The tool's value with the digits that its tolerance makes meaningful, plus two."""
    scale = max(abs(c.expected), abs(v), 1e-300)
    tols = [t for t in (c.rel, None if c.abs is None else c.abs / scale) if t]
    tol = max(tols) if tols else 1e-6
    digits = int(min(10, max(4, math.ceil(-math.log10(tol)) + 2)))
    return f"{v:.{digits}g}"


def _cell(text: str) -> str:
    return str(text).replace("|", "\\|").replace("\n", " ")


def render_markdown(cases: dict[str, Case] | None = None) -> str:
    """docs/validation.md as text: every case run, grouped by topic (deterministic)."""
    cases = CASES if cases is None else cases
    n = len(cases)
    ok = sum(c.passes() for c in cases.values())
    lines = [
        "# Validation: every reference check in the tests",
        "",
        "Generated by `python scripts/make_validation.py` from `tests/reference_cases.py`; "
        "do not edit by hand (`tests/test_validation_doc.py` fails when this file is out of "
        "date). Each row is one check that a test asserts: the quantity and its inputs, the "
        "published source of the expected value (\"our derivation\" where the value follows "
        "from a published method by our own statics or algebra; the derivations are in "
        "[method.md](method.md)), the expected value, the value the tool computes now, the "
        "tolerance the test allows, and the test. Where a test checks every step of a lap, "
        "the row shows the step farthest from the expected value.",
        "",
        f"{ok} of {n} checks pass.",
        "",
    ]
    for topic in dict.fromkeys(c.topic for c in cases.values()):
        lines += [f"## {topic}", "",
                  "| quantity | source | expected | tool | unit | tolerance | test | |",
                  "|---|---|---|---|---|---|---|---|"]
        for c in (c for c in cases.values() if c.topic == topic):
            v = c.value()
            mark = "pass" if c.passes() else "**FAIL**"
            lines.append(
                f"| {_cell(c.quantity)} | {_cell(c.source)} | {_fmt_expected(c.expected)} | "
                f"{_fmt_value(c, v)} | {_cell(c.unit)} | {c.tolerance_text()} | "
                f"`{c.test}` | {mark} |")
        lines.append("")
    lines += ["## Checks kept in their own test files", "", *NOT_TABULATED, ""]
    return "\n".join(lines)


# ============================================================================================
# Air density as the car file states it
# ============================================================================================


def car_air_density(**air_keys):
    """Air density [kg/m³] of the helper car with the given ``[air]`` keys (no density key)."""
    return make_car(air={"density_kg_m3": None, **air_keys}).air.density


_T = "test_car.py::test_air_density_from_pressure_temperature_and_humidity"
_case("car_air.conditions", T_AIR,
      "car-file air density from 1013.25 hPa, 20 °C, 50 % RH",
      f"{CIPM}, eq. (1) (evaluated)", 1.19931, "kg/m³", _T,
      lambda: car_air_density(temperature_c=20.0, pressure_hpa=1013.25,
                              relative_humidity_pct=50.0), abs=2e-5)
_case("car_air.altitude", T_AIR, "car-file air density from altitude_m = 1000",
      f"{ISA}: 1.11164 (geopotential) or 1.11166 (geometric); the tolerance covers both",
      1.11165, "kg/m³", "test_car.py::test_air_density_from_altitude",
      lambda: car_air_density(altitude_m=1000.0), rel=1e-4)
_case("car_air.default", T_AIR, "car-file air density with no [air] keys",
      f"{ISA}, sea-level density", 1.225, "kg/m³",
      "test_car.py::test_air_density_default_is_iso_sea_level", lambda: car_air_density(),
      rel=1e-5)
