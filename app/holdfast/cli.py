"""Command line: ``holdfast demo | scan | open | export``.

User mistakes become one line on stderr and exit code 2; an internal error is one line and exit code 1
(``HOLDFAST_DEBUG=1`` shows the traceback). Results go to files, the human summary to stdout, progress
and diagnostics to stderr.

Ctrl+C: ``scan`` and ``export`` run their work in a worker thread while the main thread waits, so SIGINT is
seen at once even while the solver (C code) is busy. The work is asked to stop at its next result; if it
is still inside the solver two seconds later, the process leaves anyway (every finished refit is already
committed to the cache, and files are only ever renamed into place complete). Exit code 130.
"""

from __future__ import annotations

import argparse
import os
import sys
import threading
from collections.abc import Callable
from pathlib import Path

from holdfast import __version__
from holdfast.errors import Cancelled, UserError
from holdfast.output.progress import ProgressBar, end_open_lines
from holdfast.textsafe import clip, safe_text

CANCELLED = "holdfast: cancelled; finished refits are kept and the next run resumes from them"
#: Set by Ctrl+C while a command's work runs in the worker thread; long work polls it.
_CANCEL = threading.Event()
#: Longest message line printed (a longer one is cut in the middle).
MAX_LINE = 1000

CAUTION = (
    "Flags are statistical evidence, not proof of a wrong label. In regulated or safety-relevant data "
    "(medical, credit, safety), label changes follow the domain's own review and local rules."
)


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
    frame = None
    if getattr(args, "decisions", None):
        from holdfast.data.load import read_table
        from holdfast.review.decisions import check_relabels, read_decisions

        decisions = read_decisions(args.decisions)  # read first: a bad file fails before the scan
        frame = read_table(Path(args.data))
        if spec.data.label in frame.columns:  # else the scan names the missing column
            label = spec.data.label
            check_relabels(decisions, frame[label], label_column=label, source=str(args.decisions))
    _check_writable(out, "--out")
    if not args.no_cache and spec.run.cache:
        from holdfast.engine.cache import cache_root

        _check_writable(cache_root(), "the scan cache", "; or run with --no-cache")
    scan = run_scan(
        args.data,
        spec,
        progress=None if args.quiet else ProgressBar(),
        should_cancel=_CANCEL.is_set,
        use_cache=False if args.no_cache else None,
        frame=frame,
    )
    for warning in scan.prepared.warnings:
        print(f"holdfast: warning: {safe_text(clip(warning, MAX_LINE))}", file=sys.stderr)
    rows_path, summary_path = scan.findings.write(out)
    print(f"{args.data}: {'from cache; ' if scan.from_cache else ''}wrote {rows_path} and {summary_path}")
    print(summary_text(scan.findings.summary))
    if args.top:
        print(top_rows_text(scan.findings.rows, args.top))
    print()
    if decisions is not None:
        from holdfast.review.whatif import what_if, write_whatif

        result = what_if(
            scan,
            decisions,
            progress=None if args.quiet else ProgressBar("what-if refits"),
            use_cache=False if args.no_cache else None,
            should_cancel=_CANCEL.is_set,
        )
        json_path, changed_path = write_whatif(result, out)
        print(f"{args.decisions}: wrote {json_path} and {changed_path}")
        print("\n".join(safe_text(line) for line in result.text().splitlines()))  # ids are data text
    print(CAUTION)
    return 0


def _check_writable(folder: Path, what: str, more: str = "") -> None:
    """Before any long work: ``folder`` exists or can be made, and a file can be created in it."""
    import tempfile

    from holdfast.atomic import environment_error

    try:
        folder.mkdir(parents=True, exist_ok=True)
        with tempfile.TemporaryFile(dir=folder):
            pass
    except OSError as exc:
        err = environment_error(folder, exc)
        raise UserError(f"{str(err).replace('cannot write', f'{what} cannot be written', 1)}{more}") from exc


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


def _in_worker(work: Callable[[], int]) -> int:
    """Run ``work`` in a worker thread; Ctrl+C in the main thread stops it promptly (module docstring)."""
    outcome: dict[str, object] = {}

    def run() -> None:
        try:
            outcome["code"] = work()
        except BaseException as exc:  # handed to the main thread as it is
            outcome["error"] = exc

    _CANCEL.clear()
    worker = threading.Thread(target=run, name="holdfast-work", daemon=True)
    worker.start()
    try:
        while worker.is_alive():
            worker.join(0.1)
    except KeyboardInterrupt:
        _CANCEL.set()
        worker.join(2.0)
        if worker.is_alive():  # inside the solver: leave now, nothing half-written stays visible
            sys.stdout.flush()
            end_open_lines()
            print(CANCELLED, file=sys.stderr, flush=True)
            os._exit(130)
        raise
    if "error" in outcome:
        raise outcome["error"]  # type: ignore[misc]
    return int(outcome.get("code") or 0)  # type: ignore[call-overload]


def _one_line(text: str) -> str:
    """A message as one literal line of at most ``MAX_LINE`` characters."""
    return safe_text(clip(text, MAX_LINE))


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``holdfast`` console script."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "command", None):
        parser.print_help(sys.stderr)
        return 2
    try:
        if args.command in ("scan", "export") or (args.command == "demo" and args.no_ui):
            return _in_worker(lambda: int(args.func(args) or 0))
        return int(args.func(args) or 0)
    except UserError as exc:
        end_open_lines()
        print(f"holdfast: error: {_one_line(str(exc))}", file=sys.stderr)  # data text: one literal line
        return 2
    except (Cancelled, KeyboardInterrupt):
        end_open_lines()
        print(CANCELLED, file=sys.stderr)
        return 130
    except BrokenPipeError:
        # stdout went to a reader that stopped early (`holdfast scan ... | head`): not an error; the files
        # are written. Point stdout at devnull so the interpreter's final flush does not fail again
        # (Python documentation, signal module, "Note on SIGPIPE").
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0
    except Exception as exc:
        end_open_lines()
        if os.environ.get("HOLDFAST_DEBUG"):
            raise
        first = _one_line(str(exc).splitlines()[0]) if str(exc) else ""
        print(
            f"holdfast: internal error: {exc.__class__.__name__}: {first} (HOLDFAST_DEBUG=1 shows more)",
            file=sys.stderr,
        )
        return 1


if __name__ == "__main__":
    sys.exit(main())
