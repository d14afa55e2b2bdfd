"""``fringecount batch``: re-analyse every clip of a folder or a manifest.

Examples
--------
::

    fringecount batch archive/2026 --out reanalysis/2026 --jobs 2
    fringecount batch runs.toml --out reanalysis/runs --fps 30
    fringecount batch runs.csv --out /shared/reanalysis --dask tcp://scheduler:8786

Exit status: 0 when every clip is ``ok``, 1 when at least one clip failed,
2 for a bad invocation (bad manifest, missing folder...).
"""

from __future__ import annotations

import argparse
import contextlib
import json
import signal
import sys

import pandas as pd

from ..batch import run_batch
from ..errors import InputError
from ._options import add_clip_arguments, add_gap_arguments, add_roi_arguments, settings_from_args

__all__ = ["register", "run"]

#: Failed clips named on stderr at the end (all of them are in batch.csv).
_LISTED_FAILURES = 20


def register(subparsers) -> None:
    """Add the ``batch`` subcommand to ``subparsers``."""
    from . import add_output_arguments

    parser = subparsers.add_parser(
        "batch", help="count fringes in every clip of a folder or a manifest (resumable)",
        description=("Analyse every clip in a folder (recursively) or listed in a manifest (.csv or .toml) "
                     "into one result folder per clip under --out, plus the table OUT/batch.csv. "
                     "Clips with a complete result are skipped, so an interrupted batch is resumed by "
                     "running the same command again. The clip and ROI options below are the defaults "
                     "for every clip; a manifest overrides them per clip."))
    parser.add_argument("source", metavar="DIR_OR_MANIFEST",
                        help="folder of clips, or a manifest file (.csv or .toml)")
    parser.add_argument("--out", required=True, metavar="OUT",
                        help="output folder: one result folder per clip plus batch.csv")
    parser.add_argument("-j", "--jobs", type=int, default=None, metavar="N",
                        help="clips analysed at once in worker processes (default: number of CPU cores)")
    parser.add_argument("--force", action="store_true",
                        help="re-analyse clips that already have a result (replacing it)")
    parser.add_argument("--report", action="store_true",
                        help="also write report.png/report.html into each new result folder")
    parser.add_argument("--dask", metavar="ADDRESS", default=None,
                        help=("run on a Dask distributed cluster, e.g. tcp://scheduler:8786; clips and OUT "
                              "must be on a file system every worker sees under the same paths"))
    parser.add_argument("--timeout", type=float, default=None, metavar="SECONDS",
                        help="stop a clip's analysis after this many seconds (local runs; an error row)")
    add_clip_arguments(parser)
    add_roi_arguments(parser)
    add_gap_arguments(parser)
    add_output_arguments(parser)
    parser.set_defaults(func=run)


def _progress_bar(total: int, quiet: bool):
    from tqdm import tqdm

    return tqdm(total=total, unit="clip", file=sys.stderr, disable=quiet, dynamic_ncols=True,
                desc="batch", leave=True)


@contextlib.contextmanager
def _terminate_as_interrupt():
    """Treat SIGTERM (a batch system stopping the job) like Ctrl-C: stop workers, write the table."""
    def stop(signum, frame):
        raise KeyboardInterrupt

    try:
        previous = signal.signal(signal.SIGTERM, stop)
    except ValueError:  # not the main thread: leave SIGTERM alone
        yield
        return
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


def _plain(value):
    """A table cell as a plain JSON value (full float precision, missing as null)."""
    if value is None or (not isinstance(value, str) and pd.isna(value)):
        return None
    return value.item() if hasattr(value, "item") else value


def run(args: argparse.Namespace) -> int:
    """Run the batch described by ``args``; return 0 (all ok) or 1 (some clips failed)."""
    from ..batch import plan_batch

    if args.jobs is not None and args.jobs < 1:
        raise InputError(f"--jobs must be at least 1, got {args.jobs}")
    if args.dask is not None and args.timeout is not None:
        raise InputError("--timeout applies to local runs only; set time limits in the Dask cluster instead")
    settings = settings_from_args(args)
    items = plan_batch(args.source, settings=settings, exclude=[args.out])
    bar = _progress_bar(len(items), args.quiet or args.json)
    failed = 0

    def progress(row: dict) -> None:
        nonlocal failed
        failed += row["status"] != "ok"
        bar.set_postfix(failed=failed, refresh=False)
        bar.update(1)

    try:
        with _terminate_as_interrupt():
            report = run_batch(items, args.out, jobs=args.jobs, force=args.force,
                               report=args.report, dask=args.dask, timeout_s=args.timeout, progress=progress)
    finally:
        bar.close()
    table = report.table
    if args.json:
        rows = [{key: _plain(value) for key, value in row.items()} for row in table.to_dict(orient="records")]
        print(json.dumps({"out": str(report.out_dir), "clips": len(table), "ok": report.n_ok,
                          "failed": report.n_failed, "tables": [str(p) for p in report.written],
                          "rows": rows}, indent=2))
    elif not args.quiet:
        reused = int(table["reused"].sum())
        print(f"fringecount: batch: {report.n_ok} ok ({reused} already done), {report.n_failed} failed; "
              f"table {report.out_dir / 'batch.csv'}", file=sys.stderr)
        failed_rows = table[table["status"] != "ok"]
        for _, row in failed_rows.head(_LISTED_FAILURES).iterrows():
            print(f"fringecount: failed: {row['clip']}: {row['error']}", file=sys.stderr)
        if len(failed_rows) > _LISTED_FAILURES:
            print(f"fringecount: ... and {len(failed_rows) - _LISTED_FAILURES} more failed clips; "
                  f"see the error column of {report.out_dir / 'batch.csv'}", file=sys.stderr)
    return 1 if report.n_failed else 0
