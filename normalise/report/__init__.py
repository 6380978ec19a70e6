"""Report pass: what a run did, for people and programs.

``manifest`` (the JSON contract of a run and its one-screen summary), ``catalog`` (a written database read back:
its catalog, counts and bookkeeping rows), ``html`` (the run report, a self-contained page, with ``diagram``, its
entity-relationship diagram, and ``markup``, its escaped pieces and charts) and ``dictionary`` (the data
dictionary in Markdown).
"""

from .catalog import read_database
from .dictionary import render_dictionary
from .html import UnreadableManifest, read_manifest, render_report, report_existing, write_outputs, write_report
from .manifest import MANIFEST_VERSION, summary

__all__ = ["MANIFEST_VERSION", "UnreadableManifest", "read_database", "read_manifest", "render_dictionary",
           "render_report", "report_existing", "summary", "write_outputs", "write_report"]
