"""The reference run of the service and fault tests: the engine's own in-process interface
(worker.runner.run_in_process) on the same body, in a fresh Python process."""

from __future__ import annotations

import io
import json
import subprocess
import sys
from pathlib import Path

import numpy as np

REPO_ROOT = Path(__file__).resolve().parents[2]


def in_process(body: dict) -> dict:
    """worker.runner.run_in_process(body), run in a fresh Python process.

    A fresh process puts the reference run in the same starting state as a worker's pool process,
    so what is compared is the service's path, not whatever this test process ran before.
    """
    script = (
        "import io, json, sys\n"
        "import numpy as np\n"
        "from worker.runner import run_in_process\n"
        "out = run_in_process(json.load(sys.stdin))\n"
        "buffer = io.BytesIO()\n"
        "np.savez(buffer, draws=out['draws'], **{f'stat_{c}_{k}': v for c, s in "
        "enumerate(out['stats']) for k, v in s.items()})\n"
        "meta = {'names': out['names'], 'summary': out['summary'], 'verdict': out['verdict']}\n"
        "sys.stdout.buffer.write(json.dumps(meta).encode() + b'\\n' + buffer.getvalue())\n"
    )
    done = subprocess.run(
        [sys.executable, "-c", script],
        input=json.dumps(body).encode(),
        capture_output=True,
        check=True,
        timeout=600,
        cwd=REPO_ROOT,
    )
    head, _, archive = done.stdout.partition(b"\n")
    meta = json.loads(head)
    with np.load(io.BytesIO(archive), allow_pickle=False) as arrays:
        stats: list[dict] = [{} for _ in range(arrays["draws"].shape[0])]
        for key in arrays.files:
            if key.startswith("stat_"):
                _, chain, name = key.split("_", 2)
                stats[int(chain)][name] = arrays[key]
        return {**meta, "draws": arrays["draws"], "stats": stats}
