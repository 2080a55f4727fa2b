"""``firewatch report``: a firing record for the quality file (PDF, HTML, or the chart alone as PNG)."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from firewatch.commands import _args
from firewatch.commands._args import UsageError

__all__ = ["FORMATS", "add_parser", "run"]

FORMATS = {".pdf": "pdf", ".html": "html", ".htm": "html", ".png": "png"}


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "report",
        help="a firing report for the quality file (PDF, HTML or PNG)",
        description="One or two pages: the site, kiln and schedule, start and end in local time, a chart of plan, "
        "reference thermocouple and reconciled pyrometers, a summary (peak, holds, rates through critical ranges, "
        "deviation, divergence, gaps), every alarm with who acknowledged or shelved it, every operator note, and a "
        "SHA-256 of the log's readings that ties the paper to its data.",
    )
    p.add_argument("log", metavar="FILE.db")
    p.add_argument("-o", "--output", metavar="OUT", help="OUT.pdf (the default, beside the log), OUT.html, or OUT.png for the chart alone")
    p.add_argument("--site", metavar="SITE.toml", help="site profile for names, roles and [site] timezone (default: the one kept in the log)")
    p.add_argument("--utc", action="store_true", help="clock times in UTC instead of the site's time zone")
    p.add_argument("--paper", choices=("a4", "letter"), default="a4", help="paper size (default a4)")
    p.add_argument("--units", type=_args.unit, default="C", help="temperatures in C, F or K (default C)")


def _output(args: argparse.Namespace) -> tuple[Path, str]:
    if args.output is None:
        return Path(args.log).with_suffix(".pdf"), "pdf"
    out = Path(args.output)
    kind = FORMATS.get(out.suffix.lower())
    if kind is None:
        raise UsageError(f"-o: {args.output!r}: unknown report type {out.suffix or '(no suffix)'}; expected .pdf, .html or .png")
    if not out.parent.is_dir():
        raise UsageError(f"-o: directory {out.parent} does not exist")
    return out, kind


def run(args: argparse.Namespace) -> int:
    import sqlite3

    from firewatch.commands._common import open_log
    from firewatch.settings._tomlcheck import ProfileError

    out, kind = _output(args)
    site = None
    if args.site:
        from firewatch.settings.profile import load_site

        try:
            site = load_site(args.site)
        except ProfileError as exc:
            raise UsageError(f"--site: {exc.problems[0]}") from None
    try:
        import matplotlib  # noqa: F401 (availability check: imported only to see that the extra is installed)
    except ImportError:
        sys.stderr.write("firewatch report: needs matplotlib: pip install 'firewatch-kiln[report]'\n")
        return 1
    from firewatch.report.document import build_document
    from firewatch.settings.timefmt import Clock
    from firewatch.settings.units import Units
    from firewatch.store.record import read_record

    with open_log(args.log) as reader:
        try:
            record = read_record(reader, site)
        except sqlite3.DatabaseError as exc:
            raise UsageError(f"FILE.db: {args.log}: damaged firing log ({exc})") from None
    clock = Clock.for_site(record.timezone, utc=args.utc)
    doc = build_document(record, clock, Units(args.units))
    try:
        if kind == "pdf":
            from firewatch.report.pdf import write_pdf

            pages = write_pdf(doc, out, args.paper)
            what = f"{pages} page{'s' if pages != 1 else ''}"
        elif kind == "html":
            from firewatch.report.html import write_html

            write_html(doc, out, args.paper)
            what = "HTML"
        else:
            from firewatch.report.chart import chart_figure

            title = " · ".join(x for x in (record.site_name, record.kiln) if x) + "\n" + " · ".join(
                x for x in (record.schedule_name, f"from {clock.full(record.start_t)}" if record.start_t else "", record.log_name) if x)
            chart_figure(record.chart, clock, Units(args.units), title=title).savefig(out, dpi=200)
            what = "chart"
    except OSError as exc:
        raise UsageError(f"-o: cannot write {out}: {exc.strerror or exc}") from None
    print(f"firewatch report: {out} ({what}; readings SHA-256 {record.digest[:16]}…)", file=sys.stderr)
    return 0
