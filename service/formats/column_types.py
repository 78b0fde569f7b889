"""Each download column's natural type, the same in every format (docs/formats.md holds the
table): real quantities float64; whole-number quantities (discrete draws, integer formulas) and
counting statistics int64; yes/no statistics bool; ``chain`` and ``draw`` int64.

The stored arrays keep these types already (statistics by their numpy dtype, draws by the
column_types recorded beside their names); a loader hands every column over as float64, which
holds each such value exactly (whole numbers up to 2**53; IEEE 754), and the writers cast back.
"""

from __future__ import annotations

import numpy as np
from sqlalchemy import select

from service.runtime import Runtime
from service.store.models import Chain, ChainArray

FLOAT, INTEGER, BOOLEAN = "float64", "int64", "bool"
TYPES = (FLOAT, INTEGER, BOOLEAN)


def _of_dtype(dtype: str) -> str:
    kind = np.dtype(dtype).kind
    if kind == "b":
        return BOOLEAN
    return INTEGER if kind in "iu" else FLOAT


def draw_types(runtime: Runtime, chains: list[Chain]) -> list[str]:
    with runtime.sessions() as session:
        columns, types = session.execute(
            select(ChainArray.columns, ChainArray.column_types).where(
                ChainArray.chain_id == chains[0].id, ChainArray.kind == "draws"
            )
        ).one()
    # Stored before migration 0008: no types recorded, and they were downloaded as float64.
    return list(types) if types else [FLOAT] * len(columns or [])


def stat_types(runtime: Runtime, chains: list[Chain]) -> list[str]:
    """In the order of service.results.stat_names (by name)."""
    with runtime.sessions() as session:
        dtypes = session.scalars(
            select(ChainArray.dtype)
            .where(ChainArray.chain_id == chains[0].id, ChainArray.kind == "stat")
            .order_by(ChainArray.name)
        ).all()
    return [_of_dtype(d) for d in dtypes]


def typed_column(values: np.ndarray, type_name: str) -> tuple[np.ndarray, np.ndarray | None]:
    """The float64 column as its natural type, and where it holds no value (None: everywhere):
    a whole-number column can hold NaN where a draw failed, which only a missing value says."""
    if type_name == FLOAT:
        return values, None
    if type_name == BOOLEAN:
        return values != 0, None
    missing = ~np.isfinite(values)
    whole = np.where(missing, 0, values).astype(np.int64)
    return whole, (missing if missing.any() else None)
