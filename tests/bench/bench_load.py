"""Load figures inside `make bench`: the full load run of tests/load/soak.py (about 3-5 minutes)."""

from tests.load.soak import main as soak_main


def main() -> None:
    if soak_main([]) != 0:
        raise RuntimeError("the load run found errors (see the lines above)")
