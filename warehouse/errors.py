"""Typed errors of the library; the CLI turns each into one line and exit code 1."""
from __future__ import annotations


class WarehouseError(Exception):
    """Root of every error the warehouse raises on purpose."""


class BadInputError(WarehouseError):
    """An input file (or a line in it) cannot be read as a counter export."""

    def __init__(self, message: str, *, path: str | None = None, line: int | None = None) -> None:
        self.path = path
        self.line = line
        self.reason = message
        where = path or ""
        if path and line:
            where = f"{path}:{line}"
        super().__init__(f"{where}: {message}" if where else message)


class UnknownCounterError(WarehouseError):
    """A selector matched no counter."""


class BusyError(WarehouseError):
    """Another process holds the catalog's write lock for longer than we wait."""


class CatalogError(WarehouseError):
    """The catalog is missing, newer than this code, or its migrations are inconsistent."""


class ReadOnlyError(WarehouseError):
    """A statement would change the warehouse but the connection is read-only."""
