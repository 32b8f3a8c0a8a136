"""lapbalance: a quasi-static lap balance simulator.

Runs a car over a track centreline and, at every step, keeps the aerodynamic load split apart
from the load transfer caused by forces at the ground, with per-axle grip usage and balance.
SI units throughout (m, s, kg, N, rad, W, Pa).
"""

from __future__ import annotations

from lapbalance.car import Car, load_car  # noqa: E402
from lapbalance.errors import InputError, PhysicsWarning  # noqa: E402
from lapbalance.version import __version__  # noqa: E402

__all__ = [
    "Car",
    "InputError",
    "PhysicsWarning",
    "__version__",
    "load_car",
    "load_track",
    "simulate_lap",
    "LapResult",
    "compare",
    "sweep",
]


def __getattr__(name: str):
    # Lazy imports keep `import lapbalance` light (numba compiles only when a lap is run).
    if name == "load_track":
        from lapbalance.track import load_track

        return load_track
    if name in ("simulate_lap", "LapResult"):
        from lapbalance import lap

        return getattr(lap, name)
    if name in ("compare", "sweep"):
        import importlib

        # import_module, not "from lapbalance import compare": that form looks the name up on
        # this package first and would re-enter this __getattr__ without end.
        _compare = importlib.import_module("lapbalance.compare")
        return getattr(_compare, name)
    raise AttributeError(f"module 'lapbalance' has no attribute {name!r}")
