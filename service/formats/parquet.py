"""Apache Parquet downloads, written one row group per chain so only one chain is in memory."""

from __future__ import annotations

from collections.abc import Callable, Iterator, Sequence
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from service.draw_export import Selection
from service.formats.column_types import BOOLEAN, FLOAT, INTEGER, typed_column
from service.formats.layouts import chain_block, long_columns
from service.formats.spool import Spool

MEDIA_TYPE = "application/vnd.apache.parquet"
# File key-value metadata: "true" when the job stopped at its wall-time limit (draws so far only).
PARTIAL_KEY = "drawyard.partial"


ARROW_TYPES = {FLOAT: pa.float64(), INTEGER: pa.int64(), BOOLEAN: pa.bool_()}


def parquet_schema(
    names: list[str],
    layout: str,
    value_label: str,
    partial: bool = False,
    types: Sequence[str] = (),
) -> pa.Schema:
    metadata = {PARTIAL_KEY: "true" if partial else "false"}
    if layout == "wide":
        kinds = list(types) or [FLOAT] * len(names)
        fields = [pa.field(n, ARROW_TYPES[k]) for n, k in zip(names, kinds, strict=True)]
        return pa.schema(
            [pa.field("chain", pa.int64()), pa.field("draw", pa.int64()), *fields],
            metadata=metadata,
        )
    return pa.schema(
        [
            pa.field("chain", pa.int64()),
            pa.field("draw", pa.int64()),
            # Dictionary-encoded: a name repeats once per draw, the file stores it once per group.
            pa.field(value_label, pa.dictionary(pa.int32(), pa.string())),
            pa.field("value", pa.float64()),
        ],
        metadata=metadata,
    )


def _typed(values: np.ndarray, type_name: str) -> pa.Array:
    column, missing = typed_column(values, type_name)
    return pa.array(column, type=ARROW_TYPES[type_name], mask=missing)


def _table(
    schema: pa.Schema, names: list[str], layout: str, block: Any, types: Sequence[str] = ()
) -> pa.Table:
    if layout == "wide":
        kinds = list(types) or [FLOAT] * len(names)
        columns = [
            pa.array(np.full(block.draw.shape[0], block.chain, np.int64)),
            pa.array(block.draw),
        ]
        columns += [_typed(block.values[:, i], kinds[i]) for i in range(len(names))]
        return pa.Table.from_arrays(columns, schema=schema)
    chain, draw, quantity = long_columns(block, len(names))
    labels = pa.DictionaryArray.from_arrays(pa.array(quantity), pa.array(names, pa.string()))
    values = pa.array(block.values.reshape(-1))
    return pa.Table.from_arrays([pa.array(chain), pa.array(draw), labels, values], schema=schema)


def stream_parquet(
    selection: Selection,
    load_chain: Callable[[int], np.ndarray],
    layout: str,
    value_label: str = "quantity",
    partial: bool = False,
) -> Iterator[bytes]:
    """The file's bytes: header, then one row group per chain as it is written, then the footer."""
    names = list(selection.names)
    schema = parquet_schema(names, layout, value_label, partial, selection.types)
    spool = Spool()
    with pq.ParquetWriter(pa.PythonFile(spool, mode="w"), schema, compression="zstd") as writer:
        for chain_index in selection.chains:
            values = load_chain(chain_index)[:: selection.thin, selection.columns]
            block = chain_block(chain_index + 1, selection.thin, values)
            table = _table(schema, names, layout, block, selection.types)
            writer.write_table(table, row_group_size=max(table.num_rows, 1))
            del table, block, values
            yield spool.take()
    yield spool.take()
