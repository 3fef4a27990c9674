"""``ctpore report FOLDER``: write the self-contained HTML report of a ctpore folder.

The folder may be a result (``ctpore analyze``), a batch (``ctpore batch``) or a comparison
(``ctpore compare``, a ``compare_<name>`` folder). The report goes to ``FOLDER/report.html``
unless ``--out`` names another file; an existing report is replaced only with ``--force``.
"""

from __future__ import annotations

import sys

__all__ = ["add_report_parser", "run_report"]


def add_report_parser(subparsers):
    """Add the ``report`` sub-command to an argparse sub-parser collection."""
    r = subparsers.add_parser("report", help="write a self-contained HTML report of a result, "
                              "batch or comparison folder")
    r.add_argument("folder", help="folder written by `ctpore analyze`, `ctpore batch` or "
                   "`ctpore compare`")
    r.add_argument("--out", metavar="FILE", help="HTML file to write (default: "
                   "FOLDER/report.html); its figures go to figures/ beside it")
    r.add_argument("--force", action="store_true", help="replace an existing report")
    r.add_argument("--quiet", action="store_true", help="print nothing on success")
    return r


def run_report(args) -> int:
    """Run ``ctpore report``; returns the exit status (0). Raises InputError on bad input."""
    from .html import write_report

    path = write_report(args.folder, out=args.out, force=args.force)
    if not getattr(args, "quiet", False):
        print(f"{args.folder}: report -> {path}", file=sys.stdout)
    return 0
