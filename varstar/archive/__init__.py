"""Per-target HDF5 archive: the only code that knows its tables.

* :mod:`.layout`: schema version, tables and column types, the root check.
* :mod:`.tables`: column-store operations on one table.
* :mod:`.records`: decoded records shared by readers and the writer.
* :mod:`.store`: :class:`ArchiveStore` (create, open, read; open a change).
* :mod:`.writes`: :class:`ArchiveWriter`, every change an archive knows.
* :mod:`.journal`, :mod:`.transaction`: atomic changes under a lock.
* :mod:`.integrity`: checksums and the writer's checks; :mod:`.verify`: verify and upgrade.

Nothing here imports the workflows or the command line.
"""

from .store import ArchiveStore, create_archive, open_archive
from .verify import upgrade, verify
from .writes import ArchiveWriter

__all__ = ["ArchiveStore", "ArchiveWriter", "create_archive", "open_archive", "upgrade", "verify"]
