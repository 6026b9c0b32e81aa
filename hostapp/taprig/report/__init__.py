"""taprig.report — the handout: a PDF (or the figures alone) of one or more sessions, for a class or a lab write-up.

It asks and shows: points from the session file, analysis from :mod:`taprig.analysis`, curves from
:mod:`taprig.reduce.curves`, the rig's picture from :mod:`taprig.rig.picture`, counters from a fresh decode. The
command is ``taprig handout`` (:mod:`taprig.cli.commands.handout`); the dashboard offers the same PDF.
"""

from taprig.report.content import HandoutError, SessionContent, load_session, point_state
from taprig.report.handout import ALIGN_CHOICES, handout_pages, write_figures, write_handout

__all__ = ["ALIGN_CHOICES", "HandoutError", "SessionContent", "handout_pages", "load_session", "point_state",
           "write_figures", "write_handout"]
