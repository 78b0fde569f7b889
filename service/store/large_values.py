"""A stored array's bytes written and read in pieces, so that neither a database driver nor the
database library in our process holds a second whole copy of a long chain's draws.

SQLite: incremental blob I/O (``zeroblob`` then ``sqlite3.Blob`` writes and reads, in the
session's own transaction). Binding a 75 MB value instead costs a copy in the driver and another
in SQLite's record, both in this process. Other backends (PostgreSQL) take and give the value
whole, as before; there the copies are the driver's and the server's.
"""

from __future__ import annotations

import sqlite3
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

from sqlalchemy import func, select, update
from sqlalchemy.orm import Session

from service.store.arrays import PIECE_BYTES
from service.store.models import ChainArray


def _sqlite(session: Session) -> sqlite3.Connection | None:
    connection = session.connection().connection.driver_connection
    return connection if isinstance(connection, sqlite3.Connection) else None


def write_chain_array_data(session: Session, row_id: int, data: bytes | bytearray) -> None:
    """Set ``chain_arrays.data`` of row ``row_id`` (already inserted) to ``data``."""
    connection = _sqlite(session)
    if connection is None:
        session.execute(update(ChainArray).where(ChainArray.id == row_id).values(data=data))
        return
    # the row's id is its rowid: an INTEGER PRIMARY KEY column is the rowid's alias in SQLite
    session.execute(
        update(ChainArray).where(ChainArray.id == row_id).values(data=func.zeroblob(len(data)))
    )
    view = memoryview(data)
    with connection.blobopen("chain_arrays", "data", row_id) as blob:
        for start in range(0, len(view), PIECE_BYTES):
            blob.write(view[start : start + PIECE_BYTES])


@contextmanager
def chain_array_data(session: Session, row_id: int) -> Iterator[Any]:
    """A reader (``read(size)``) of ``chain_arrays.data`` of row ``row_id``, or the bytes."""
    connection = _sqlite(session)
    if connection is None:
        yield session.scalars(select(ChainArray.data).where(ChainArray.id == row_id)).one()
        return
    with connection.blobopen("chain_arrays", "data", row_id, readonly=True) as blob:
        yield blob
