"""Self-contained HTML pages of a night and of a whole archive, for a quick look after observing.

:func:`night_page` answers "was last night good?": a one-sentence verdict at
the top (:func:`night_verdict`, rules below), the light curve per band with the
check stars, the exposure zero points against time with the airmass (a passing
cloud shows as a dip or jump), the comparison stars' statuses and their own
curves against the ensemble, the check stars' measured against predicted
scatter, the standard colour when the night is transformed, and the settings,
software and target description used.  :func:`archive_page` lists every night
with its verdict and a short summary, draws the whole light curve, the latest
period analysis (phased curve and stored periodogram peaks), the period
history, O − C with the ephemeris history, and the extrema predicted for the
week after the last night.

Each page is one HTML document that needs nothing else: figures are PNG images
embedded as ``data:`` URIs (a PNG's size does not grow with the number of
points, as an SVG's does, and a browser reports its pixel size, so a test can
tell that it decoded), CSS sits in one ``<style>`` block, and there is no
script, font, stylesheet or link to another site, so a page works offline and
as an e-mail attachment.  A viewport meta tag, a max-width column and tables
that scroll sideways keep it readable on a phone.  Figures come from
:mod:`varstar.plots` (Okabe & Ito colour-blind-safe palette, shapes as well as
colours) and every figure has an ``alt`` text.  Every string that comes from a
user or a file (target name, star ids, reasons, file names, the description) is
escaped with :func:`html.escape`.

The package is a shell (:mod:`.markup`, :mod:`.verdict`, :mod:`.figures`, :mod:`.night`, :mod:`.archive`): it reads the archive through its public API
(:func:`varstar.workflows.archive.open_archive`) and imports matplotlib inside
functions.  :func:`write_page` writes a page through
:func:`varstar.export.write_atomic`.
"""

from __future__ import annotations

from .archive import PREDICT_DAYS, archive_page, harmonic_model, utc_iso_of_jd
from .figures import comparison_figure, comparison_residuals, figure_html, zero_point_figure
from .markup import STATUS_WORDS, write_page
from .night import night_page
from .verdict import NightVerdict, night_verdict

__all__ = ["PREDICT_DAYS", "STATUS_WORDS", "NightVerdict", "archive_page", "harmonic_model", "utc_iso_of_jd", "comparison_figure", "comparison_residuals", "figure_html", "night_page",
           "night_verdict", "write_page", "zero_point_figure"]
