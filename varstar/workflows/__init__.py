"""The orchestrations above the archive: each reads inputs, calls the pure cores, and records through the archive's API.

* :mod:`.reduce`: one night's measurement table -> its tables and report (computation only).
* :mod:`.night`: ingest files into an archive, remove a night.
* :mod:`.standard`: the standard system on an archive (transform nights, field colours).
* :mod:`.periods`: period analysis of an archive, recorded in its history.
* :mod:`.extrema`: timings, O - C, ephemeris fits and predictions.
* :mod:`.archive`: the public :class:`Archive` (the store plus these analyses).

Nothing here names an archive table: the archive package
(:class:`varstar.archive.ArchiveStore`, :class:`varstar.archive.ArchiveWriter`)
is the only code that does.
"""
