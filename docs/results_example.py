# %% [markdown]
# # A batch in pandas, Parquet and ROOT
#
# A notebook-style script (cells marked `# %%`; run it whole with
# `python docs/results_example.py [DB_URL] [BATCH] [OUT_DIR]`, or cell by cell in an editor that
# knows the marks). It needs the `data` extra: `pip install 'benchwright[data]'`.
#
# Defaults: the database the demo writes (`benchwright demo --out benchwright-demo`) and its
# invented batch NR-2026-W14.

# %%
import sys
from pathlib import Path

import numpy as np

from sequencer import results

DB = sys.argv[1] if len(sys.argv) > 1 else "sqlite:///benchwright-demo/results.db"
BATCH = sys.argv[2] if len(sys.argv) > 2 else "NR-2026-W14"
OUT = Path(sys.argv[3] if len(sys.argv) > 3 else "benchwright-results")
OUT.mkdir(parents=True, exist_ok=True)

# %% [markdown]
# ## Runs and their verdicts

# %%
runs = results.runs(DB, batch=BATCH)
print(runs[["run_id", "board", "status", "verdict", "measurements", "failed", "started_at"]])

# %% [markdown]
# ## Every judged value of the batch, in one line
# Columns as `benchwright export` (DESIGN.md): run_id, started_at, procedure, ..., quantity, value,
# uncertainty, unit, low, high, verdict.

# %%
m = results.measurements(DB, batch=BATCH)
latest = runs.sort_values("started_at").groupby("board").tail(1)["run_id"]  # each board's last run
m = m[m["run_id"].isin(latest)]
gain = m[m["quantity"] == "gain"].pivot_table(index=["board", "channel"], columns="output", values="value")
print(gain.round(4))

# %% [markdown]
# ## Yield per board: a channel passes when none of its values, nor the board's own, failed

# %%
fails = m[m["verdict"] == "fail"]
bad_boards = set(fails.loc[fails["channel"].isna(), "board"])
bad_channels = set(zip(fails["board"], fails["channel"], strict=True))
channels = m.loc[m["channel"].notna(), ["board", "channel"]].drop_duplicates()
channels["passes"] = [b not in bad_boards and (b, c) not in bad_channels
                      for b, c in zip(channels["board"], channels["channel"], strict=True)]
print(channels.groupby("board")["passes"].mean().rename("yield"))

# %% [markdown]
# ## Transfer curves: the points the gain was fitted on, with their residuals

# %%
series = results.series(DB, batch=BATCH)
transfer = series[series["series"] == "transfer"]
for (board, channel, output), curve in list(transfer.groupby(["board", "channel", "output"]))[:4]:
    slope, intercept = np.polyfit(curve["x"], curve["y"], 1)
    print(f"{board} ch{channel} {output}: {len(curve)} points, slope {slope:.4f}, "
          f"largest residual {curve['residual'].abs().max():.3f} mV")

# %% [markdown]
# ## Traces of one run: samples in volts, time of sample i = t0_s + i * dt_s

# %%
first_run = int(runs["run_id"].iloc[0])
traces = results.traces(DB, run=first_run)
if len(traces):
    t = traces.iloc[0]
    samples = np.asarray(t["samples_V"])
    print(f"run {first_run}: {len(traces)} traces; first {t['step']} {t['name']}: {samples.size} samples, "
          f"peak {1e3 * samples.max():.2f} mV at {1e9 * (t['t0_s'] + t['dt_s'] * samples.argmax()):.1f} ns")

# %% [markdown]
# ## The same tables as files: Parquet (pandas, pyarrow, polars, DuckDB, Spark) and ROOT TTrees

# %%
from sequencer.results.formats import read_root, write_parquet, write_root  # noqa: E402
from sequencer.results.tables import Selection, read_table  # noqa: E402
from sequencer.store import Store  # noqa: E402

with Store.open(DB, create=False) as store:
    table = read_table(store, "measurements", Selection(batch=BATCH))
    write_parquet(table, OUT / "measurements.parquet")
    write_root([table, read_table(store, "series", Selection(batch=BATCH))], OUT / "batch.root")
print(f"wrote {OUT / 'measurements.parquet'} and {OUT / 'batch.root'}")

# %% [markdown]
# In ROOT a text column is an int32 code into the tree `<table>_text` (uproot's TTree writer has no
# text branch); `read_root` joins them back:

# %%
back = read_root(OUT / "batch.root", "measurements")
print(sorted(set(back["quantity"])))
