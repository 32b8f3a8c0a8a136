# %% [markdown]
# # lapbalance in a notebook
#
# A percent-format script: open it in Jupyter (with jupytext), VS Code or Spyder and run it
# cell by cell, or run it top to bottom with `python examples/notebook.py`. It uses only the
# invented demo car and circuit. Set `LAPBALANCE_NOTEBOOK_OUT` to choose where the figures go
# (default: a temporary folder).

# %%
import os
import tempfile
from pathlib import Path

import lapbalance
from lapbalance import plots

HERE = Path(__file__).resolve().parent if "__file__" in globals() else Path("examples")
ROOT = HERE.parent
OUT = Path(os.environ.get("LAPBALANCE_NOTEBOOK_OUT") or tempfile.mkdtemp(prefix="lapbalance-"))

# %% [markdown]
# ## One lap
# A `LapResult` shows a one-line summary as its repr, and the summary table as HTML in
# Jupyter. Numbers are attributes and properties: `lap_time_s`, `summary` (a dict),
# `provenance` (what was run).

# %%
car = lapbalance.load_car(ROOT / "examples" / "gt_coupe.toml")
track = lapbalance.load_track(ROOT / "tracks" / "veldmoor_ring.csv", step_m=2.0)
lap = lapbalance.simulate_lap(car, track)
print(repr(lap))
print(f"{lap.time_label}: {lap.lap_time_s:.3f} s, top speed "
      f"{lap.summary['top_speed_kph']:.1f} km/h")

# %% [markdown]
# ## Channels as a DataFrame (needs the `frames` extra: `pip install 'lapbalance[frames]'`)

# %%
try:
    frame = lap.to_frame()
except ImportError as e:
    print(e)
else:
    corner_steps = frame[frame["ay_mps2"].abs() >= 4.0]
    print(frame[["distance_m", "speed_kph", "balance_index"]].describe().loc[["min", "max"]])
    print(f"{len(corner_steps)} of {len(frame)} steps corner at 4 m/s² or more")

# %% [markdown]
# ## Corners and the lift-off check

# %%
for c in lap.corners[:4]:
    print(c["id"], c["direction"], f"{c['min_speed_kph']:.1f} km/h", c["liftoff_verdict"],
          "-", c["liftoff_reason"])

# %% [markdown]
# ## Figures
# Every figure function takes a result and returns a matplotlib `Figure` (no pyplot, no
# display needed); in Jupyter a returned `Figure` shows inline. `plots.LAP_FIGURES` lists
# them with their captions; `plots.figure_bytes(fig, "svg")` renders one to a file format.

# %%
for name, (fn, caption) in plots.LAP_FIGURES.items():
    print(f"{name}: {caption}")
speed_map = plots.track_map_figure(lap, channel="speed_kph")
(OUT / "speed_map.svg").write_bytes(plots.figure_bytes(speed_map, "svg"))
balance_map = plots.track_map_figure(lap)  # cornering balance, straights grey
(OUT / "balance_map.png").write_bytes(plots.figure_bytes(balance_map, "png", dpi=60))
print("figures in", OUT)

# %% [markdown]
# ## A variant, compared

# %%
wing = lapbalance.simulate_lap(lapbalance.load_car(ROOT / "examples" / "gt_coupe_high_wing.toml"),
                               track)
print(f"high wing minus base: {wing.lap_time_s - lap.lap_time_s:+.3f} s")
from lapbalance import provenance  # noqa: E402

for key, base_value, variant_value in provenance.car_differences(lap.car, wing.car):
    print(f"{key}: {base_value} -> {variant_value}")

# %% [markdown]
# ## What was run
# The provenance record names every input file with its SHA-256, the overrides, the
# resolved car in SI and the settings; `summary.json` written by `lapbalance lap --out`
# carries it, and `lapbalance rerun summary.json` runs the lap again from it.

# %%
rec = lap.provenance
for f in rec["inputs"]:
    print(f["role"], Path(f["path"]).name, f["sha256"][:12])
