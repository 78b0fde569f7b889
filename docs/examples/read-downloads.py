# docs/examples/read-downloads.py: reading the downloads (run from docs/examples/)
import json
import os
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow.parquet as pq

from service.client import DrawyardClient, wait_for_job

with open("job.json") as file:
    body = json.load(file)
with DrawyardClient(os.environ.get("DRAWYARD_URL", "http://127.0.0.1:8000")) as api:
    job = wait_for_job(api, api.submit(body).id, progress=False)
    api.download(job.id, "draws", Path("draws.parquet"), format="parquet", layout="long")
    api.download(job.id, "draws", Path("draws.npz"), format="npz")
    api.download(job.id, "sampler-stats", Path("stats.parquet"), format="parquet")

table = pq.read_table("draws.parquet")            # chain, draw, quantity, value
print("long columns:", table.column_names, "rows:", table.num_rows)
print("partial:", pq.read_schema("draws.parquet").metadata[b"drawyard.partial"].decode())
with np.load("draws.npz", allow_pickle=False) as f:
    values, names = f["values"], list(f["quantities"])
print("npz:", values.shape, [str(name) for name in names])
stats = pd.read_parquet("stats.parquet")
print("types:", {c: str(stats[c].dtype) for c in ("chain", "draw", "divergent", "doublings")})
