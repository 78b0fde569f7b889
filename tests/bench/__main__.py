"""`make bench`: run every tests/bench/bench_*.py main() in one process, one after another.

Each benchmark prints its own ratios, measured side by side inside its main(); running them all in
one go on one machine keeps the figures comparable. `python -m tests.bench service` runs only the
benchmarks whose file name contains "service".
"""

import os

# One BLAS thread, as the workers run (one chain per process, one process per core); set before
# numpy loads OpenBLAS. An explicit setting in the environment wins.
for _variable in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_variable, "1")

import importlib  # noqa: E402
import platform  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
import traceback  # noqa: E402
from pathlib import Path  # noqa: E402

HERE = Path(__file__).resolve().parent
REPO_ROOT = HERE.parent.parent


def machine_line() -> str:
    import numpy
    import scipy

    model = "unknown CPU"
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                model = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    return (
        f"{model}; {os.cpu_count()} logical CPUs; Python {platform.python_version()}; "
        f"numpy {numpy.__version__}; scipy {scipy.__version__}; {platform.platform()}; "
        f"OPENBLAS_NUM_THREADS={os.environ.get('OPENBLAS_NUM_THREADS')}"
    )


def main(argv: list[str]) -> int:
    if str(REPO_ROOT) not in sys.path:
        sys.path.insert(0, str(REPO_ROOT))
    names = sorted(p.stem for p in HERE.glob("bench_*.py"))
    if argv:
        names = [n for n in names if any(word in n for word in argv)]
    if not names:
        print("no benchmark matched", argv, file=sys.stderr)
        return 1
    print(f"machine: {machine_line()}", flush=True)
    failed = []
    for name in names:
        print(f"\n=== {name} ===", flush=True)
        started = time.perf_counter()
        try:
            module = importlib.import_module(f"tests.bench.{name}")
            module.main()
        except Exception:
            # One broken benchmark must not hide the others' figures.
            traceback.print_exc()
            failed.append(name)
        print(f"({name}: {time.perf_counter() - started:.1f} s)", flush=True)
    if failed:
        print(f"\nfailed: {', '.join(failed)}", file=sys.stderr)
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
