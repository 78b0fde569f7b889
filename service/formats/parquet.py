"""Apache Parquet downloads, written one row group per chain so only one chain is in memory."""

from __future__ import annotations

from collections.abc import Callable, Iterator
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from service.draw_export import Selection
from service.formats.layouts import chain_block, long_columns
from service.formats.spool import Spool

MEDIA_TYPE = "application/vnd.apache.parquet"
# File key-value metadata: "true" when the job stopped at its wall-time limit (draws so far only).
PARTIAL_KEY = "drawyard.partial"


def parquet_schema(
    names: list[str], layout: str, value_label: str, partial: bool = False
) -> pa.Schema:
    metadata = {PARTIAL_KEY: "true" if partial else "false"}
    if layout == "wide":
        fields = [pa.field(name, pa.float64()) for name in names]
        return pa.schema(
            [pa.field("chain", pa.int32()), pa.field("draw", pa.int64()), *fields],
            metadata=metadata,
        )
    return pa.schema(
        [
            pa.field("chain", pa.int32()),
            pa.field("draw", pa.int64()),
            # Dictionary-encoded: a name repeats once per draw, the file stores it once per group.
            pa.field(value_label, pa.dictionary(pa.int32(), pa.string())),
            pa.field("value", pa.float64()),
        ],
        metadata=metadata,
    )


def _table(schema: pa.Schema, names: list[str], layout: str, block: Any) -> pa.Table:
    if layout == "wide":
        columns = [
            pa.array(np.full(block.draw.shape[0], block.chain, np.int32)),
            pa.array(block.draw),
        ]
        columns += [pa.array(block.values[:, i]) for i in range(len(names))]
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
    schema = parquet_schema(names, layout, value_label, partial)
    spool = Spool()
    with pq.ParquetWriter(pa.PythonFile(spool, mode="w"), schema, compression="zstd") as writer:
        for chain_index in selection.chains:
            values = load_chain(chain_index)[:: selection.thin, selection.columns]
            block = chain_block(chain_index + 1, selection.thin, values)
            table = _table(schema, names, layout, block)
            writer.write_table(table, row_group_size=max(table.num_rows, 1))
            del table, block, values
            yield spool.take()
    yield spool.take()
