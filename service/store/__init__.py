"""The SQL results store: tables, engines, array encoding and migrations."""

from service.store.migrate import migrate

__all__ = ["migrate"]
