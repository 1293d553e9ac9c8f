"""Command line: ``holdfast demo | scan | open | export``.

User mistakes become one line on stderr and exit code 2; an internal error is one line and exit code 1
(``HOLDFAST_DEBUG=1`` shows the traceback). Results go to files, the human summary to stdout, progress
and diagnostics to stderr.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

from holdfast import __version__
from holdfast.errors import Cancelled, UserError
from holdfast.textsafe import safe_text

CAUTION = (
    "Flags are statistical evidence, not proof of a wrong label. In regulated or safety-relevant data "
    "(medical, credit, safety), label changes follow the domain's own review and local rules."
)


class ProgressBar:
    """A one-line progress bar with ETA on stderr (plain lines when stderr is not a terminal)."""

    def __init__(self, label: str = "refits", stream=None) -> None:
        self.label = label
        self.stream = stream or sys.stderr
        self.tty = self.stream.isatty()
        self.last = 0.0
        self.last_pct = -10

    def __call__(self, done: int, total: int, eta: float | None) -> None:
        now = time.monotonic()
        finished = done >= total
        if self.tty:
            if not finished and now - self.last < 0.1:
                return
            self.last = now
            width = 30
            frac = done / total if total else 1.0
            bar = "#" * int(frac * width) + "-" * (width - int(frac * width))
            eta_s = f" ETA {_fmt_seconds(eta)}" if eta is not None and not finished else ""
            self.stream.write(f"\r{self.label} [{bar}] {done}/{total}{eta_s}   ")
            if finished:
                self.stream.write("\n")
            self.stream.flush()
        else:
            pct = int(100 * done / total) if total else 100
            if pct >= self.last_pct + 10 or finished:
                self.last_pct = pct
                eta_s = f", ETA {_fmt_seconds(eta)}" if eta is not None and not finished else ""
                self.stream.write(f"{self.label}: {done}/{total} ({pct}%{eta_s})\n")
                self.stream.flush()


def _fmt_seconds(s: float) -> str:
    s = max(0, round(s))
    return f"{s // 60}m{s % 60:02d}s" if s >= 60 else f"{s}s"


def _load_spec(args: argparse.Namespace):
    from holdfast.data.spec import default_spec, load_spec

    if args.spec and args.label:
        raise UserError("give either --spec FILE or --label COLUMN, not both")
    if getattr(args, "id", None) and not args.label:
        raise UserError("--id goes with --label (a spec file names its id column in [data])")
    if args.spec:
        spec = load_spec(args.spec)
    elif args.label:
        spec = default_spec(args.label, id_column=getattr(args, "id", None))
    else:
        raise UserError("give --spec FILE (a TOML model spec) or --label COLUMN (SVM with RBF kernel, C=1)")
    if getattr(args, "jobs", None) is not None:
        from dataclasses import replace

        if args.jobs == 0 or args.jobs < -1:
            raise UserError(f"--jobs must be a positive integer or -1 (all cores), got {args.jobs}")
        spec = replace(spec, run=replace(spec.run, jobs=args.jobs))
    return spec


def cmd_scan(args: argparse.Namespace) -> int:
    from holdfast.engine.scan import run_scan
    from holdfast.output.terminal import summary_text, top_rows_text

    if args.top < 0:
        raise UserError(f"--top must be 0 or more, got {args.top}")
    spec = _load_spec(args)
    out = Path(args.out)
    if out.exists() and not out.is_dir():
        raise UserError(f"{out}: --out must be a folder")
    decisions = None
    if getattr(args, "decisions", None):
        from holdfast.review.decisions import read_decisions

        decisions = read_decisions(args.decisions)  # read first: a bad file fails before the scan
    scan = run_scan(
        args.data,
        spec,
        progress=None if args.quiet else ProgressBar(),
        use_cache=False if args.no_cache else None,
    )
    rows_path, summary_path = scan.findings.write(out)
    print(f"{args.data}: {'from cache; ' if scan.from_cache else ''}wrote {rows_path} and {summary_path}")
    print(summary_text(scan.findings.summary))
    if args.top:
        print(top_rows_text(scan.findings.rows, args.top))
    print()
    if decisions is not None:
        from holdfast.review.whatif import what_if, write_whatif

        result = what_if(scan, decisions, progress=None if args.quiet else ProgressBar("what-if refits"))
        json_path, changed_path = write_whatif(result, out)
        print(f"{args.decisions}: wrote {json_path} and {changed_path}")
        print("\n".join(safe_text(line) for line in result.text().splitlines()))  # ids are data text
    print(CAUTION)
    return 0


def cmd_demo(args: argparse.Namespace) -> int:
    from holdfast.data.demo import write_demo

    folder = Path(args.dir)
    data_path, spec_path = write_demo(folder)
    print(f"demo data: {data_path}\ndemo spec: {spec_path}", file=sys.stderr)
    if args.no_ui:
        ns = argparse.Namespace(
            data=str(data_path),
            spec=str(spec_path),
            label=None,
            jobs=args.jobs,
            out=str(folder / "results"),
            quiet=False,
            no_cache=False,
            top=10,
        )
        return cmd_scan(ns)
    ns = argparse.Namespace(
        data=str(data_path), spec=str(spec_path), label=None, jobs=args.jobs, session=None
    )
    return cmd_open(ns)


def cmd_open(args: argparse.Namespace) -> int:
    from holdfast.ui.launch import launch

    spec = _load_spec(args)
    return launch(Path(args.data), spec, session=Path(args.session) if args.session else None)


def cmd_export(args: argparse.Namespace) -> int:
    from holdfast.output.export import export_session

    written = export_session(
        Path(args.session),
        decisions=args.to,
        cleaned=args.cleaned,
        report=args.report,
        force=args.force,
        progress=ProgressBar(),
    )
    for path in written:
        print(f"wrote {path}")
    return 0


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="holdfast",
        description="Find the rows a classifier rests on and the rows that are probably mislabelled.",
        epilog=CAUTION,
    )
    p.add_argument("--version", action="version", version=f"holdfast {__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")

    def data_args(sp: argparse.ArgumentParser) -> None:
        sp.add_argument("data", help="the data set: a Parquet file (or CSV)")
        sp.add_argument("--spec", help="model spec (TOML)")
        sp.add_argument(
            "--label", help="label column, when there is no spec (SVM, RBF kernel, C=1, gamma=scale)"
        )
        sp.add_argument("--id", help="with --label: the id column (stable row ids)")
        sp.add_argument("--jobs", type=int, help="parallel refits: a positive number or -1 for all cores")

    sp = sub.add_parser("scan", help="headless: fit, exact LOO over the support rows, write results")
    data_args(sp)
    sp.add_argument("--out", default="results", help="output folder (default: results/)")
    sp.add_argument("--no-cache", action="store_true", help="neither reuse nor write the result cache")
    sp.add_argument("--quiet", action="store_true", help="no progress bar")
    sp.add_argument(
        "--top", type=int, default=10, metavar="N", help="list the N most suspicious rows (10; 0: none)"
    )
    sp.add_argument(
        "--decisions",
        help="decisions file (.parquet or .csv, as exported): also refit with its relabels and exclusions "
        "applied; writes whatif.json and whatif_rows.parquet",
    )
    sp.set_defaults(func=cmd_scan)

    sp = sub.add_parser("open", help="open the inspector (terminal UI) on a data set")
    data_args(sp)
    sp.add_argument("--session", help="decisions journal (default: DATA.holdfast.db beside the data)")
    sp.set_defaults(func=cmd_open)

    sp = sub.add_parser("demo", help="write the fruit-packhouse demo data set and open the inspector on it")
    sp.add_argument(
        "--dir", default="holdfast-demo", help="folder for the demo files (default: ./holdfast-demo)"
    )
    sp.add_argument("--no-ui", action="store_true", help="run the headless scan instead of the inspector")
    sp.add_argument("--jobs", type=int, help="parallel refits")
    sp.set_defaults(func=cmd_demo)

    sp = sub.add_parser("export", help="export decisions, the cleaned data set or a report from a session")
    sp.add_argument("session", help="the session's decisions journal (.db)")
    sp.add_argument("--to", help="decisions file (.parquet or .csv)")
    sp.add_argument(
        "--cleaned", help="cleaned data set (.parquet or .csv): relabels applied, exclusions removed"
    )
    sp.add_argument("--report", help="report (.md) with images beside it")
    sp.add_argument("--force", action="store_true", help="overwrite existing files")
    sp.set_defaults(func=cmd_export)
    return p


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``holdfast`` console script."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "command", None):
        parser.print_help(sys.stderr)
        return 2
    try:
        return int(args.func(args) or 0)
    except UserError as exc:
        print(f"holdfast: error: {safe_text(str(exc))}", file=sys.stderr)  # data text: one literal line
        return 2
    except (Cancelled, KeyboardInterrupt):
        print(
            "holdfast: cancelled; finished refits are kept and the next run resumes from them",
            file=sys.stderr,
        )
        return 130
    except Exception as exc:
        if os.environ.get("HOLDFAST_DEBUG"):
            raise
        first = safe_text(str(exc).splitlines()[0]) if str(exc) else ""
        print(
            f"holdfast: internal error: {exc.__class__.__name__}: {first} (HOLDFAST_DEBUG=1 shows more)",
            file=sys.stderr,
        )
        return 1


if __name__ == "__main__":
    sys.exit(main())
