"""Downloads: CSV and JSON text of stored draws per second, and the memory the text takes.

The path the API takes for every chain: decode the stored array (zlib-compressed .npy, checksum
verified: service/store/arrays.py), then format it block by block (service/draw_export.py). Timed
here without HTTP for one invented chain of 20,000 draws of 100 quantities (16 MB of float64),
median of 5 interleaved rounds of CPU time; then the peak memory Python allocates while the whole
CSV is produced (tracemalloc, in a separate pass since tracing slows everything), over the chain's
own size. Goal (issue 18): >= 50 MB/s, memory bounded by a block (CELLS_PER_BLOCK cells).
"""

from __future__ import annotations

import statistics
import time
import tracemalloc

import numpy as np

from service.draw_export import CELLS_PER_BLOCK, Selection, stream_csv, stream_json
from service.store.arrays import decode_array, encode_array

DRAWS, QUANTITIES, ROUNDS = 20_000, 100, 5


def main() -> None:
    values = np.random.default_rng(5).normal(size=(DRAWS, QUANTITIES))
    stored = encode_array(values)
    names = [f"q[{i + 1}]" for i in range(QUANTITIES)]
    selection = Selection([0], list(range(QUANTITIES)), names, 1)

    def load(_: int) -> np.ndarray:
        return decode_array(stored.data, stored.sha256)

    formats = {
        "csv": lambda: stream_csv(selection, load, names),
        "json": lambda: stream_json("job", "quantities", selection, load),
    }
    seconds: dict[str, list[float]] = {name: [] for name in formats}
    sizes: dict[str, int] = {}
    for _ in range(ROUNDS):
        for name, stream in formats.items():
            start = time.process_time()
            sizes[name] = sum(len(part.encode()) for part in stream())
            seconds[name].append(time.process_time() - start)
    for name in formats:
        cpu = statistics.median(seconds[name])
        print(f"{name:4s}: {sizes[name] / 1e6:6.1f} MB of text in {cpu:5.2f} s CPU = "
              f"{sizes[name] / 1e6 / cpu:6.1f} MB/s (goal >= 50)", flush=True)
    for name, stream in formats.items():
        tracemalloc.start()
        for _ in stream():
            pass
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
        print(f"{name:4s}: peak Python allocation {peak / 1e6:6.1f} MB while streaming = "
              f"{peak / values.nbytes:4.2f} x the chain's {values.nbytes / 1e6:.0f} MB "
              f"(the chain decoded, plus one block of {CELLS_PER_BLOCK} cells)", flush=True)


if __name__ == "__main__":
    main()
