"""Per-target HDF5 archive: layout, atomic changes under a lock, reading."""

from .store import Archive, create_archive, open_archive
from .transaction import transaction

__all__ = ["Archive", "create_archive", "open_archive", "transaction"]
