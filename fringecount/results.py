"""Writing and reading a result folder: ``frames.csv``, ``gaps.csv``, ``summary.json`` (+ Parquet).

The folder is staged beside its final place and renamed into it in one step,
so a reader never sees a half-written result, and an existing result is never
replaced without ``force``.
"""

from __future__ import annotations

import json
import math
import os
from pathlib import Path

import numpy as np
import pandas as pd

from ._atomic import staged_directory
from .errors import InputError
from .settings import CountSettings

__all__ = ["write_result", "read_result", "summary_json"]


def _clean(obj):
    if isinstance(obj, dict):
        return {str(k): _clean(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_clean(v) for v in obj]
    if isinstance(obj, (np.bool_, bool)):
        return bool(obj)
    if isinstance(obj, (np.integer,)):
        return int(obj)
    if isinstance(obj, (np.floating, float)):
        v = float(obj)
        return v if math.isfinite(v) else None
    if isinstance(obj, np.ndarray):
        return _clean(obj.tolist())
    return obj


def summary_json(summary: dict, *, indent: int | None = 2) -> str:
    """The summary as strict JSON (NaN and infinities become null)."""
    return json.dumps(_clean(summary), indent=indent, allow_nan=False)


def _has_parquet() -> bool:
    try:
        import pyarrow  # noqa: F401
    except ImportError:
        return False
    return True


def write_result(result, out_dir: str | os.PathLike, *, force: bool = False, parquet: bool | None = None,
                 report: bool = False, clip=None) -> list[Path]:
    """Write ``result`` (a :class:`~fringecount.pipeline.CountResult`) to ``out_dir`` atomically.

    Writes ``frames.csv``, ``gaps.csv`` and ``summary.json`` (and ``frames.parquet``
    / ``gaps.parquet`` when pyarrow is installed and ``parquet`` is not False; and
    ``report.png``/``report.html`` with ``report``). Raises
    :class:`~fringecount.errors.ResultExistsError` if ``out_dir`` already holds a
    result and ``force`` is False. Returns the paths written.
    """
    out_dir = Path(out_dir)
    use_parquet = _has_parquet() if parquet is None else parquet
    names = []
    with staged_directory(out_dir, force=force) as stage:
        result.frames.to_csv(stage / "frames.csv", index=False)
        result.gaps.to_csv(stage / "gaps.csv", index=False)
        names += ["frames.csv", "gaps.csv"]
        if use_parquet:
            result.frames.to_parquet(stage / "frames.parquet", index=False)
            result.gaps.to_parquet(stage / "gaps.parquet", index=False)
            names += ["frames.parquet", "gaps.parquet"]
        if report:
            from .report import write_report
            written = write_report(result, stage, clip=clip, force=True)
            names += [Path(p).name for p in written]
        (stage / "summary.json").write_text(summary_json(result.summary) + "\n", encoding="utf-8")
        names.append("summary.json")
    return [out_dir / n for n in names]


def read_result(out_dir: str | os.PathLike):
    """Read a result folder written by :func:`write_result` back into a ``CountResult``."""
    from .pipeline import CountResult

    out_dir = Path(out_dir)
    summ = out_dir / "summary.json"
    if not summ.is_file():
        raise InputError(f"{out_dir} holds no result (summary.json missing); run 'fringecount count CLIP --out {out_dir}'")
    try:
        summary = json.loads(summ.read_text(encoding="utf-8"))
        frames = pd.read_csv(out_dir / "frames.csv")
        gaps = pd.read_csv(out_dir / "gaps.csv") if (out_dir / "gaps.csv").stat().st_size > 1 else pd.DataFrame()
    except (OSError, ValueError, pd.errors.ParserError) as exc:
        raise InputError(f"the result in {out_dir} is unreadable ({type(exc).__name__}: {exc}); re-run the count") from None
    if "trusted" in frames:
        frames["trusted"] = frames["trusted"].astype(str).str.lower().isin(["true", "1"])
    known = set(CountSettings.__dataclass_fields__)
    raw = {k: v for k, v in (summary.get("settings") or {}).items() if k in known}
    for k in ("center", "crop"):
        if raw.get(k) is not None:
            raw[k] = tuple(raw[k])
    try:
        settings = CountSettings(**raw)
    except (TypeError, InputError):
        settings = CountSettings()
    return CountResult(frames, gaps, summary, settings)
