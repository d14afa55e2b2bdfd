"""Batch re-analysis of a recording archive: resumable, failure-isolated, local or on Dask.

A batch is a list of :class:`BatchItem` (one clip and its settings), planned from
a folder (every clip in it, recursively) or from a manifest (CSV or TOML, one
entry per clip with its own settings). :func:`run_batch` analyses each clip into
its own result folder under the output folder, exactly as ``count --out`` writes
it, and writes one table ``batch.csv`` (and ``batch.parquet``) with a row per clip.

Guarantees
----------
- *Resumable*: a clip whose result folder holds ``summary.json`` (the marker of a
  complete result, see :func:`fringecount._atomic.staged_directory`) is not
  analysed again; its files are left untouched and its row is rebuilt from its
  ``summary.json``. Result folders are staged under a hidden temporary name and
  renamed when complete, so a run killed at any moment (even ``kill -9``) leaves
  either a complete result or a stale staging folder, which the next run removes.
- *Failure-isolated*: each clip is analysed in its own worker process. A bad clip
  becomes an ``error`` row with a one-line message; a worker that dies (a crashing
  decoder, out of memory) or overruns ``timeout_s`` becomes an ``error`` row too;
  the other clips complete.
- *Beyond one machine*: with ``dask=ADDRESS`` the clips run as tasks on an existing
  Dask distributed cluster; the workers write the result folders themselves, so the
  clips and the output folder must be visible to every worker under the same path.

Examples
--------
>>> from fringecount.batch import run_batch                  # doctest: +SKIP
>>> report = run_batch("archive/2026", "reanalysis", jobs=2)  # doctest: +SKIP
>>> report.table[["clip", "status", "total_fringes"]]         # doctest: +SKIP
"""

from __future__ import annotations

import contextlib
import csv
import dataclasses
import hashlib
import io
import json
import logging
import math
import multiprocessing
import multiprocessing.connection
import os
import pickle
import re
import shutil
import signal
import threading
import time
import tomllib
import uuid
import warnings
from collections import deque
from dataclasses import dataclass, field
from pathlib import Path, PurePath
from typing import Any, Callable, Iterable, Mapping

import pandas as pd

from ._atomic import write_bytes_atomic, write_text_atomic
from .errors import FringecountError, InputError, ResultExistsError, SettingsError
from .settings import CountSettings

__all__ = [
    "BATCH_COLUMNS",
    "VIDEO_EXTENSIONS",
    "STACK_EXTENSIONS",
    "IMAGE_EXTENSIONS",
    "MANIFEST_KEYS",
    "BatchItem",
    "BatchReport",
    "find_clips",
    "read_manifest",
    "plan_batch",
    "result_folder_name",
    "clean_stale_staging",
    "analyse_item",
    "run_batch",
    "available_cores",
]

logger = logging.getLogger(__name__)

#: Files taken as one clip each when a folder is searched.
VIDEO_EXTENSIONS = (".avi", ".mp4", ".mov", ".mkv")
#: Multi-frame files taken as one clip each (TIFF stacks, NumPy arrays of frames).
STACK_EXTENSIONS = (".tif", ".tiff", ".npy")
#: A folder holding at least :data:`MIN_IMAGES_PER_FOLDER` files with these
#: extensions is taken as one clip (a folder of numbered images).
IMAGE_EXTENSIONS = (".png", ".bmp", ".jpg", ".jpeg")
MIN_IMAGES_PER_FOLDER = 2

#: Columns of ``batch.csv`` in order. With a derive model, each derived quantity Q
#: adds ``derived_Q``, ``derived_Q_sigma`` and ``derived_Q_unit`` after these.
BATCH_COLUMNS = (
    "clip", "status", "total_fringes", "total_fringes_sigma", "error",
    "result_dir", "n_gaps", "ambiguous", "frames", "fps", "elapsed_s", "reused", "settings_changed",
    "model", "model_params",
)

#: Manifest keys (CSV columns / TOML keys) and what they set. ``params.NAME`` keys
#: (any NAME) are the derive model's parameters.
MANIFEST_KEYS = {
    "path": "the clip: a file or a folder of images, relative to the manifest's folder",
    "fps": "frame rate in frames/s",
    "channel": "colour channel: auto, red, green, blue or gray",
    "frames": "frame range FIRST[:LAST[:STEP]], 0-based, LAST inclusive",
    "center": "ring centre X,Y in pixels",
    "inner": "inner radius of the annulus in pixels",
    "outer": "outer radius of the annulus in pixels",
    "crop": "rectangle X0,Y0,X1,Y1 in pixels (X1, Y1 exclusive)",
    "saturation": "pixel value treated as saturated",
    "geometry": "auto, rings or straight",
    "fixed_center": "true to keep one centre for the whole clip",
    "min_visibility": "visibility below which a frame is not trusted",
    "max_step": "largest frame-to-frame step followed, in fringes (<= 0.5)",
    "hop_range": "largest whole-fringe jump a mode hop is assumed to hide, in fringes",
    "wavelengths": "wavemeter log (CSV: time_s, wavelength_nm), relative to the manifest's folder",
    "log_offset": "seconds added to the wavelength log's times",
    "air_wavelengths": "true when the log's wavelengths are in air",
    "model": "derive model applied to the count (see fringecount.models)",
}

_SUMMARY = "summary.json"
_LOCK = ".batch.lock"
_TABLE_STEM = "batch"
_NAME_HASH_LEN = 8
_STAGING_RE = re.compile(r"^\.(?P<name>.+-[0-9a-f]{%d})\.[A-Za-z0-9_]+\.(?P<kind>part|old)$" % _NAME_HASH_LEN)
_TABLE_TMP_RE = re.compile(r"^\.%s\.(csv|parquet)\.[A-Za-z0-9_]+\.part$" % _TABLE_STEM)


# --------------------------------------------------------------------------- planning

@dataclass(frozen=True)
class BatchItem:
    """One clip of a batch with everything needed to analyse it.

    Attributes
    ----------
    clip : pathlib.Path
        The recording: a file, or a folder of numbered images.
    name : str
        The clip as the batch table names it: its path relative to the searched
        folder or as written in the manifest (``/`` separators).
    settings : CountSettings
        Settings for this clip.
    model : str or None
        Derive model applied to the count, or ``None``.
    model_params : dict
        The model's parameters as given (strings with units, or numbers).
    """

    clip: Path
    name: str
    settings: CountSettings = field(default_factory=CountSettings)
    model: str | None = None
    model_params: Mapping[str, Any] = field(default_factory=dict)

    @property
    def result_name(self) -> str:
        """Folder name of this clip's result (see :func:`result_folder_name`)."""
        return result_folder_name(self.name)


def result_folder_name(clip_name: str) -> str:
    """Stable, unique folder name for the result of the clip named ``clip_name``.

    The relative path is made safe for any file system (``/`` becomes ``__``,
    other unusual characters ``_``, at most 80 characters) and suffixed with the
    first 8 hex digits of the SHA-256 of ``clip_name`` itself, so two different
    paths never share a folder even when their safe forms agree.

    Examples
    --------
    >>> result_folder_name("2026/run 1.avi")
    '2026__run_1.avi-e73f15de'
    """
    digest = hashlib.sha256(clip_name.encode("utf-8")).hexdigest()[:_NAME_HASH_LEN]
    slug = re.sub(r"[^A-Za-z0-9._-]+", "_", clip_name.replace("/", "__")).strip("._-")[:80]
    return f"{slug or 'clip'}-{digest}"


def _natural_key(name: str) -> list:
    return [int(part) if part.isdigit() else part.lower() for part in re.split(r"(\d+)", name)]


def _tiff_pages(path: Path) -> int:
    """Number of pages of a TIFF (0 when it cannot be read: it then stays a clip of its own)."""
    try:
        import tifffile
        with tifffile.TiffFile(path) as tif:
            return len(tif.pages)
    except Exception:  # noqa: BLE001 - an unreadable TIFF is reported when it is analysed
        return 0


def _is_image_folder(folder: Path, filenames: list[str]) -> bool:
    """A folder of numbered images: >= 2 non-TIFF images, or >= 2 TIFFs of which the first has one page."""
    images = [n for n in filenames if Path(n).suffix.lower() in IMAGE_EXTENSIONS]
    if len(images) >= MIN_IMAGES_PER_FOLDER:
        return True
    tiffs = sorted((n for n in filenames if Path(n).suffix.lower() in (".tif", ".tiff")), key=_natural_key)
    return len(tiffs) >= MIN_IMAGES_PER_FOLDER and _tiff_pages(folder / tiffs[0]) == 1


def find_clips(folder: str | os.PathLike, *, settings: CountSettings | None = None,
               exclude: Iterable[str | os.PathLike] = ()) -> list[BatchItem]:
    """Every clip under ``folder``, recursively, in sorted order of relative path.

    A clip is a file with an extension in :data:`VIDEO_EXTENSIONS` or
    :data:`STACK_EXTENSIONS`, or a folder of numbered images (read in natural
    order as the frames of one clip). A folder is a folder of images when it
    holds at least :data:`MIN_IMAGES_PER_FOLDER` files with an extension in
    :data:`IMAGE_EXTENSIONS`, or at least that many TIFFs of which the first (in
    natural order) has a single page; the image and TIFF files in it are then
    frames, not clips. Hidden files and folders (name starting with ``.``) and
    the folders in ``exclude`` (e.g. the output folder) are skipped. Extensions
    are matched case-insensitively.

    Parameters
    ----------
    folder : path
        Folder to search.
    settings : CountSettings, optional
        Settings given to every clip (default: ``CountSettings()``).
    exclude : iterable of path
        Folders not searched.

    Returns
    -------
    list of BatchItem

    Raises
    ------
    InputError
        ``folder`` is not a folder, or holds no clip.
    """
    root = Path(folder)
    if not root.is_dir():
        raise InputError(f"{root} is not a folder; give a folder of clips or a manifest (.csv/.toml)")
    settings = settings or CountSettings()
    skip = {Path(p).resolve() for p in exclude}
    items: list[BatchItem] = []
    for dirpath, dirnames, filenames in os.walk(root):
        here = Path(dirpath)
        rel_here = here.relative_to(root)
        dirnames[:] = sorted(d for d in dirnames
                             if not d.startswith(".") and (here / d).resolve() not in skip)
        filenames = sorted(n for n in filenames if not n.startswith("."))
        clip_extensions = VIDEO_EXTENSIONS + STACK_EXTENSIONS
        if _is_image_folder(here, filenames):
            # The searched folder itself holding the images is named after itself.
            items.append(BatchItem(here, rel_here.as_posix() if here != root else root.absolute().name, settings))
            clip_extensions = tuple(e for e in clip_extensions if e not in (".tif", ".tiff"))
        for name in filenames:
            if Path(name).suffix.lower() in clip_extensions:
                rel = rel_here / name
                items.append(BatchItem(here / name, rel.as_posix(), settings))
    if not items:
        exts = ", ".join(VIDEO_EXTENSIONS + STACK_EXTENSIONS)
        raise InputError(f"no clips found in {root} (looked for {exts} and folders of images); "
                         "check the folder or give a manifest")
    items.sort(key=lambda it: it.name)
    return items


def _one_line(text: str) -> str:
    return " ".join(str(text).split())


def _parse_bool(value: Any, key: str, where: str) -> bool:
    if isinstance(value, bool):
        return value
    text = str(value).strip().lower()
    if text in ("true", "yes", "1", "on"):
        return True
    if text in ("false", "no", "0", "off"):
        return False
    raise SettingsError(f"{where}: {key} must be true or false, got {value!r}")


def _parse_float(value: Any, key: str, where: str) -> float:
    if isinstance(value, bool):
        raise SettingsError(f"{where}: {key} must be a number, got {value!r}")
    try:
        return float(value)
    except (TypeError, ValueError):
        raise SettingsError(f"{where}: {key} must be a number, got {value!r}") from None


def _parse_numbers(value: Any, n: int, key: str, where: str, example: str, cast=float) -> tuple:
    parts = value if isinstance(value, (list, tuple)) else str(value).replace(" ", "").split(",")
    try:
        if any(isinstance(p, bool) for p in parts):
            raise ValueError
        numbers = tuple(cast(float(p)) if cast is int and float(p).is_integer() else cast(p) for p in parts)
    except (TypeError, ValueError):
        numbers = ()
    if len(numbers) != n:
        raise SettingsError(f"{where}: {key} must be {n} numbers, got {value!r}; e.g. {key} = {example}")
    return numbers


def _parse_frames(value: Any, where: str) -> dict[str, Any]:
    text = str(value).strip()
    parts = text.split(":")
    try:
        if not 1 <= len(parts) <= 3:
            raise ValueError
        first = int(parts[0]) if parts[0] else 0
        last = int(parts[1]) if len(parts) > 1 and parts[1] else None
        step = int(parts[2]) if len(parts) > 2 and parts[2] else 1
    except ValueError:
        raise SettingsError(f"{where}: frames must be FIRST[:LAST[:STEP]] in whole frames, got {value!r}; "
                            "e.g. frames = 100:900:2") from None
    return {"first_frame": first, "last_frame": last, "step": step}


#: Manifest keys holding one number, and the CountSettings field each sets.
_FLOAT_SETTINGS = {"fps": "fps", "inner": "inner_radius_px", "outer": "outer_radius_px",
                   "saturation": "saturation_level", "min_visibility": "min_visibility",
                   "max_step": "max_step_fringes", "hop_range": "hop_range_fringes", "log_offset": "log_offset_s"}


def _settings_changes(entry: Mapping[str, Any], base_dir: Path, where: str) -> dict[str, Any]:
    """Turn manifest keys (without path/model/params) into CountSettings changes."""
    kw: dict[str, Any] = {}
    for key, value in entry.items():
        if key in ("channel", "geometry"):
            kw[key] = str(value).strip().lower()
        elif key == "frames":
            kw.update(_parse_frames(value, where))
        elif key == "center":
            kw["center"] = _parse_numbers(value, 2, key, where, "320.5,240")
        elif key == "crop":
            kw["crop"] = _parse_numbers(value, 4, key, where, "100,50,540,430", cast=int)
        elif key == "fixed_center":
            kw["track_center"] = not _parse_bool(value, key, where)
        elif key in _FLOAT_SETTINGS:
            kw[_FLOAT_SETTINGS[key]] = _parse_float(value, key, where)
        elif key == "air_wavelengths":
            kw["log_air_wavelengths"] = _parse_bool(value, key, where)
        elif key == "wavelengths":
            log = Path(str(value))
            kw["wavelength_log"] = str(log if log.is_absolute() else base_dir / log)
        else:  # pragma: no cover - keys are checked before
            raise SettingsError(f"{where}: unknown key {key!r}")
    return kw


def _check_keys(entry: Mapping[str, Any], where: str) -> None:
    for key in entry:
        if key in MANIFEST_KEYS or (key.startswith("params.") and len(key) > len("params.")):
            continue
        known = ", ".join(sorted(MANIFEST_KEYS)) + ", params.NAME"
        raise SettingsError(f"{where}: unknown key {key!r}; known keys are {known}")


def _item_from_entry(entry: Mapping[str, Any], base: CountSettings, base_dir: Path, where: str) -> BatchItem:
    _check_keys(entry, where)
    if "path" not in entry or str(entry["path"]).strip() == "":
        raise SettingsError(f"{where}: no clip path; give the clip in the 'path' key")
    path_text = str(entry["path"]).strip()
    clip = Path(path_text)
    name = PurePath(path_text).as_posix()
    if not clip.is_absolute():
        clip = base_dir / clip
    model = entry.get("model")
    model = str(model).strip() if model not in (None, "") else None
    params = {k[len("params."):]: v for k, v in entry.items() if k.startswith("params.")}
    if params and model is None:
        raise SettingsError(f"{where}: model parameters {', '.join(params)} given without a model; "
                            "add a 'model' key or remove the params")
    if model is not None:
        _check_model(model, params, where)
    changes = _settings_changes({k: v for k, v in entry.items()
                                 if k not in ("path", "model") and not k.startswith("params.")},
                                base_dir, where)
    try:
        settings = base.replace(**changes)
    except InputError as exc:
        raise SettingsError(f"{where}: {exc}") from None
    return BatchItem(clip, name, settings, model, params)


def _check_model(model: str, params: Mapping[str, Any], where: str) -> None:
    """Fail early on an unknown model or parameter name (values are checked per clip)."""
    from .models import ParamReader

    try:
        ParamReader(model, params, prefix="params.")
    except InputError as exc:
        raise SettingsError(f"{where}: {_one_line(exc)}") from None


def _flatten_params(entry: Mapping[str, Any], where: str) -> dict[str, Any]:
    """TOML ``params = {a = 1}`` (or ``params.a = 1``) -> ``{"params.a": 1}``."""
    flat: dict[str, Any] = {}
    for key, value in entry.items():
        if key == "params":
            if not isinstance(value, dict):
                raise SettingsError(f"{where}: params must be a table of model parameters, "
                                    "e.g. params.thickness = \"1mm\"")
            for pkey, pvalue in value.items():
                if isinstance(pvalue, (dict, list)):
                    raise SettingsError(f"{where}: params.{pkey} must be a number or a string with a unit")
                flat[f"params.{pkey}"] = pvalue
        else:
            flat[key] = value
    return flat


def _read_toml(path: Path, base: CountSettings) -> list[BatchItem]:
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as exc:
        raise SettingsError(f"manifest {path} is not valid TOML ({_one_line(exc)}); fix the file") from None
    for key in data:
        if key not in ("defaults", "clip"):
            raise SettingsError(f"manifest {path}: unknown top-level key {key!r}; "
                                "use a [defaults] table and [[clip]] entries")
    defaults = _flatten_params(data.get("defaults", {}), f"manifest {path} [defaults]")
    if "path" in defaults:
        raise SettingsError(f"manifest {path} [defaults]: 'path' belongs in each [[clip]] entry")
    clips = data.get("clip", [])
    if not isinstance(clips, list) or not all(isinstance(c, dict) for c in clips):
        raise SettingsError(f"manifest {path}: clips must be [[clip]] tables")
    items = []
    for i, entry in enumerate(clips, start=1):
        where = f"manifest {path} [[clip]] #{i}"
        merged = {**defaults, **_flatten_params(entry, where)}
        items.append(_item_from_entry(merged, base, path.parent, where))
    return items


def _read_csv(path: Path, base: CountSettings) -> list[BatchItem]:
    try:
        text = path.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError:
        raise SettingsError(f"manifest {path} is not UTF-8 text; save it as UTF-8 CSV") from None
    try:
        reader = csv.reader(io.StringIO(text, newline=""))
        rows = [(reader.line_num, row) for row in reader]
    except csv.Error as exc:
        raise SettingsError(f"manifest {path} is not valid CSV ({_one_line(exc)}); fix the file") from None
    # Blank lines and comment lines (first cell starting with '#') are skipped.
    rows = [(n, row) for n, row in rows if any(c.strip() for c in row) and not row[0].lstrip().startswith("#")]
    if not rows:
        raise SettingsError(f"manifest {path} is empty; give a header line with a 'path' column")
    header = [h.strip() for h in rows[0][1]]
    dupes = sorted({h for h in header if header.count(h) > 1})
    if dupes:
        raise SettingsError(f"manifest {path}: column {dupes[0]!r} appears twice; keep one")
    if "path" not in header:
        raise SettingsError(f"manifest {path}: no 'path' column; the header must name the clip column 'path'")
    _check_keys({k: None for k in header if k}, f"manifest {path} header")
    items = []
    for number, row in rows[1:]:
        where = f"manifest {path} line {number}"
        if len(row) > len(header):
            raise SettingsError(f"{where}: {len(row)} cells but {len(header)} columns; quote cells with commas")
        entry = {key: cell.strip() for key, cell in zip(header, row) if key and cell.strip() != ""}
        items.append(_item_from_entry(entry, base, path.parent, where))
    return items


def read_manifest(path: str | os.PathLike, *, settings: CountSettings | None = None) -> list[BatchItem]:
    """Clips and per-clip settings from a manifest (``.csv`` or ``.toml``).

    Keys (CSV columns, TOML keys) are listed in :data:`MANIFEST_KEYS`; a key a
    clip leaves empty takes the value from ``settings`` (the command line), then
    from the TOML ``[defaults]`` table. Relative paths are relative to the
    manifest's folder. The manifest is data only: nothing in it is executed.

    Parameters
    ----------
    path : path
        The manifest.
    settings : CountSettings, optional
        Settings every clip starts from.

    Returns
    -------
    list of BatchItem
        In manifest order.

    Raises
    ------
    SettingsError
        Unknown key (named), a bad value, a clip listed twice, or an empty manifest.
    """
    path = Path(path)
    base = settings or CountSettings()
    if not path.is_file():
        raise InputError(f"manifest {path} does not exist; check the path")
    suffix = path.suffix.lower()
    if suffix == ".toml":
        items = _read_toml(path, base)
    elif suffix == ".csv":
        items = _read_csv(path, base)
    else:
        raise InputError(f"{path} is neither a folder nor a manifest; manifests end in .csv or .toml")
    if not items:
        raise SettingsError(f"manifest {path} lists no clips; add a row (CSV) or a [[clip]] entry (TOML)")
    seen: dict[str, int] = {}
    for i, item in enumerate(items, start=1):
        if item.name in seen:
            raise SettingsError(f"manifest {path}: clip {item.name!r} is listed twice (entries {seen[item.name]} "
                                f"and {i}); list each clip once")
        seen[item.name] = i
    return items


def plan_batch(source: str | os.PathLike, *, settings: CountSettings | None = None,
               exclude: Iterable[str | os.PathLike] = ()) -> list[BatchItem]:
    """The batch for ``source``: :func:`find_clips` on a folder, :func:`read_manifest` on a file."""
    source = Path(source)
    if source.is_dir():
        return find_clips(source, settings=settings, exclude=exclude)
    if not source.exists():
        raise InputError(f"{source} does not exist; give a folder of clips or a manifest (.csv/.toml)")
    return read_manifest(source, settings=settings)


# --------------------------------------------------------------------------- one clip

def _default_analyse():
    from .pipeline import count
    return count


def _read_summary(folder: Path) -> dict[str, Any]:
    with open(folder / _SUMMARY, encoding="utf-8") as fh:
        return json.load(fh)


def analyse_item(item: BatchItem, out_dir: str | os.PathLike, *, force: bool = False, report: bool = False,
                 analyse: Callable | None = None) -> dict[str, Any]:
    """Analyse one clip into ``out_dir / item.result_name``; never raises for a bad clip.

    This is what each worker (local process or Dask task) runs. With ``report``
    the folder also gets ``report.png``/``report.html`` (as ``count --report``).

    Returns
    -------
    dict
        ``status`` (``ok`` or ``error``), ``error`` (one line or ``None``),
        ``summary`` (the written ``summary.json`` as a dict, or ``None``),
        ``elapsed_s`` (wall time of analysis and writing, s), ``reused`` (the
        folder already held a result) and ``warnings`` (messages raised as warnings).
    """
    folder = Path(out_dir) / item.result_name
    start = time.perf_counter()
    outcome: dict[str, Any] = {"status": "error", "error": None, "summary": None,
                               "elapsed_s": None, "reused": False, "warnings": []}
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            from .results import write_result

            result = (analyse or _default_analyse())(item.clip, item.settings)
            write_result(result, folder, force=force, report=report, clip=item.clip)
            outcome.update(status="ok", summary=_read_summary(folder))
        except ResultExistsError:  # another run finished it meanwhile: keep that result
            outcome.update(status="ok", summary=_read_summary(folder), reused=True)
        except FringecountError as exc:
            outcome["error"] = _one_line(exc)
        except MemoryError:
            outcome["error"] = "out of memory; analyse a frame range (frames) or a crop, or use fewer jobs"
        except Exception as exc:  # noqa: BLE001 - a bad clip must not stop the batch
            outcome["error"] = _one_line(f"internal error: {type(exc).__name__}: {exc} "
                                         "(run fringecount count on this clip with --verbose and report it)")
    outcome["elapsed_s"] = time.perf_counter() - start
    outcome["warnings"] = sorted({_one_line(w.message) for w in caught})
    return outcome


# --------------------------------------------------------------------------- rows and table

def _derive(item: BatchItem, summary: Mapping[str, Any]) -> dict[str, Any]:
    """Derived-quantity columns for a clip with a model: value, 1-sigma and unit of each quantity."""
    from .models import derive_by_name

    measurements = derive_by_name(item.model, summary, **dict(item.model_params))
    columns: dict[str, Any] = {}
    for quantity, m in measurements.items():
        columns[f"derived_{quantity}"] = m.value
        columns[f"derived_{quantity}_sigma"] = m.uncertainty
        columns[f"derived_{quantity}_unit"] = m.unit
    return columns


def _is_ambiguous(summary: Mapping[str, Any]) -> bool | None:
    """True when a gap's whole-fringe count is ambiguous (``None`` if the summary does not say)."""
    if "ambiguous" in summary:
        return bool(summary["ambiguous"])
    flags = [gap.get("ambiguous") for gap in summary.get("gaps") or () if isinstance(gap, Mapping)]
    flags = [f for f in flags if f is not None]
    if flags:
        return any(bool(f) for f in flags)
    return False if "gaps" in summary else None


def _settings_changed(item: BatchItem, summary: Mapping[str, Any]) -> bool | None:
    """Whether the result was made with settings other than the batch's (``None``: not recorded)."""
    recorded = summary.get("settings")
    if not isinstance(recorded, Mapping):
        return None
    wanted = json.loads(json.dumps(item.settings.to_dict()))
    return any(recorded.get(key) != value for key, value in wanted.items())


def _row(item: BatchItem, outcome: Mapping[str, Any]) -> dict[str, Any]:
    row: dict[str, Any] = dict.fromkeys(BATCH_COLUMNS)
    row.update(clip=item.name, status=outcome["status"], error=outcome.get("error"),
               elapsed_s=outcome.get("elapsed_s"), reused=bool(outcome.get("reused")))
    if item.model:
        row["model"] = item.model
        row["model_params"] = json.dumps(dict(item.model_params), sort_keys=True)
    summary = outcome.get("summary")
    if summary is not None:
        row.update(result_dir=item.result_name,
                   total_fringes=summary.get("total_fringes"),
                   total_fringes_sigma=summary.get("total_fringes_sigma"),
                   n_gaps=len(summary.get("gaps") or ()),
                   ambiguous=_is_ambiguous(summary),
                   frames=summary.get("frames"), fps=summary.get("fps"),
                   settings_changed=_settings_changed(item, summary))
        if item.model and row["status"] == "ok":
            try:
                row.update(_derive(item, summary))
            except FringecountError as exc:
                row.update(status="error", error=_one_line(f"derive {item.model}: {exc}"))
            except Exception as exc:  # noqa: BLE001 - one clip's model must not stop the batch
                row.update(status="error", error=_one_line(
                    f"derive {item.model}: internal error: {type(exc).__name__}: {exc} (report it)"))
    return row


def _table(rows: Iterable[Mapping[str, Any]]) -> pd.DataFrame:
    rows = list(rows)
    derived = list(dict.fromkeys(k for row in rows for k in row if k not in BATCH_COLUMNS))
    table = pd.DataFrame(rows, columns=list(BATCH_COLUMNS) + derived)
    numeric = [c for c in derived if not c.endswith("_unit")]
    for col in ["total_fringes", "total_fringes_sigma", "fps", "elapsed_s"] + numeric:
        table[col] = pd.to_numeric(table[col], errors="coerce").astype("float64")
    for col in ("n_gaps", "frames"):
        table[col] = pd.to_numeric(table[col], errors="coerce").astype("Int64")
    table["ambiguous"] = table["ambiguous"].astype("boolean")
    table["settings_changed"] = table["settings_changed"].astype("boolean")
    table["reused"] = table["reused"].astype(bool)
    return table


def _write_table(table: pd.DataFrame, out_dir: Path) -> list[Path]:
    paths = [write_text_atomic(out_dir / f"{_TABLE_STEM}.csv", table.to_csv(index=False))]
    try:
        import pyarrow  # noqa: F401
    except ImportError:
        return paths
    buffer = io.BytesIO()
    table.to_parquet(buffer, index=False)
    paths.append(write_bytes_atomic(out_dir / f"{_TABLE_STEM}.parquet", buffer.getvalue()))
    return paths


# --------------------------------------------------------------------------- output folder

def clean_stale_staging(out_dir: str | os.PathLike) -> list[Path]:
    """Remove what a killed run left half-written in ``out_dir``; return what was removed.

    Staging folders (``.NAME.XXXX.part``) are deleted. A ``.NAME.XXXX.old`` folder
    (a complete result being replaced under ``force`` when the run died) is put
    back as ``NAME`` when ``NAME`` holds no complete result, and deleted otherwise.
    Temporary copies of the batch table are deleted. Only names that follow
    the batch's result-folder pattern are touched.
    """
    out_dir = Path(out_dir)
    removed: list[Path] = []
    if not out_dir.is_dir():
        return removed
    for entry in sorted(out_dir.iterdir()):
        match = _STAGING_RE.match(entry.name)
        if match and entry.is_dir():
            target = out_dir / match["name"]
            if (match["kind"] == "old" and (entry / _SUMMARY).exists()
                    and not (target / _SUMMARY).exists()):
                if target.exists():
                    shutil.rmtree(target)
                os.replace(entry, target)
                logger.info("restored %s from an interrupted replacement", target.name)
                continue
            shutil.rmtree(entry, ignore_errors=True)
            removed.append(entry)
        elif _TABLE_TMP_RE.match(entry.name) and entry.is_file():
            entry.unlink(missing_ok=True)
            removed.append(entry)
    if removed:
        logger.info("removed %d stale temporary item(s) from %s", len(removed), out_dir)
    return removed


@contextlib.contextmanager
def _exclusive(out_dir: Path):
    """Hold an advisory lock on ``out_dir`` so two batches never write into it at once."""
    try:
        import fcntl
    except ImportError:  # pragma: no cover - not POSIX: no lock
        yield
        return
    fh = open(out_dir / _LOCK, "a+b")
    try:
        try:
            fcntl.flock(fh.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            raise InputError(f"another batch is writing into {out_dir}; wait for it to finish "
                             "or choose another --out") from None
        yield
    finally:
        fh.close()  # closing releases the lock (so does the process dying)


# --------------------------------------------------------------------------- local workers

def _exit_when_parent_dies(lifeline) -> None:
    """Worker thread: the batch process never writes to ``lifeline``; EOF means it died."""
    try:
        lifeline.recv_bytes()
    except (EOFError, OSError):
        pass
    os._exit(70)  # the batch is gone (e.g. kill -9): stop instead of working for nobody


def _worker_main(conn, lifeline, item: BatchItem, out_dir: Path, options: dict) -> None:
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C is the parent's to handle
    threading.Thread(target=_exit_when_parent_dies, args=(lifeline,), daemon=True).start()
    outcome = analyse_item(item, out_dir, **options)
    conn.send(outcome)
    conn.close()


def _crash_message(exitcode: int | None) -> str:
    if exitcode is not None and exitcode < 0:
        try:
            how = f"signal {signal.Signals(-exitcode).name}"
        except ValueError:
            how = f"signal {-exitcode}"
    else:
        how = f"exit code {exitcode}"
    return (f"the worker process died while analysing this clip ({how}); the clip may crash its "
            "decoder or exhaust memory: run fringecount count on it alone to see")


@dataclass
class _Running:
    process: Any
    conn: Any
    lifeline: Any
    item: BatchItem
    started: float

    def close(self) -> None:
        self.conn.close()
        self.lifeline.close()


#: Imported once by the server that forks the workers, so a fresh worker starts warm
#: (scipy.signal is imported lazily by the phase stage; missing modules are skipped).
_PRELOAD = ["fringecount.batch", "fringecount.pipeline", "fringecount.results", "scipy.signal"]


def _worker_context():
    ctx = multiprocessing.get_context("forkserver")
    # A fresh worker forks from a server that already imported the analysis code.
    ctx.set_forkserver_preload(_PRELOAD)
    return ctx


def _run_local(items: list[BatchItem], out_dir: Path, *, jobs: int, options: dict, timeout_s: float | None,
               finish: Callable[[BatchItem, dict], None]) -> None:
    """Analyse ``items`` with at most ``jobs`` worker processes, one fresh process per clip."""
    ctx = _worker_context()
    pending = deque(items)
    running: dict[int, _Running] = {}
    try:
        while pending or running:
            while pending and len(running) < jobs:
                item = pending.popleft()
                receiver, sender = ctx.Pipe(duplex=False)
                life_reader, life_writer = ctx.Pipe(duplex=False)
                process = ctx.Process(target=_worker_main, name=f"fringecount-batch {item.name}",
                                      args=(sender, life_reader, item, out_dir, options))
                try:
                    process.start()
                except (pickle.PicklingError, AttributeError, TypeError) as exc:
                    for end in (receiver, sender, life_reader, life_writer):
                        end.close()
                    raise InputError(f"cannot send the analysis to a worker process ({_one_line(exc)}); "
                                     "pass a module-level function as analyse, or jobs=0") from None
                sender.close()
                life_reader.close()
                running[process.sentinel] = _Running(process, receiver, life_writer, item, time.monotonic())
            wait_s = None
            if timeout_s is not None:
                now = time.monotonic()
                wait_s = max(0.0, min(r.started + timeout_s - now for r in running.values()))
            handles = [r.conn for r in running.values()] + list(running)
            ready = set(multiprocessing.connection.wait(handles, timeout=wait_s))
            now = time.monotonic()
            for sentinel, run in list(running.items()):
                overdue = timeout_s is not None and now - run.started >= timeout_s
                if run.conn not in ready and sentinel not in ready and not overdue:
                    continue
                outcome = None
                try:
                    if run.conn.poll():
                        outcome = run.conn.recv()
                except (EOFError, OSError):
                    outcome = None
                if outcome is None and overdue and run.process.is_alive():
                    run.process.kill()
                    outcome = {"status": "error", "elapsed_s": now - run.started, "reused": False,
                               "error": f"analysis took longer than the {timeout_s:g} s timeout; the worker "
                                        "was stopped (raise the timeout or check the clip)"}
                run.process.join()
                if outcome is None:
                    outcome = {"status": "error", "elapsed_s": now - run.started, "reused": False,
                               "error": _crash_message(run.process.exitcode)}
                run.close()
                run.process.close()
                del running[sentinel]
                finish(run.item, outcome)
    finally:
        for run in running.values():  # interrupted: stop what still runs
            run.process.kill()
        for run in running.values():
            run.process.join()
            run.close()


def _run_inline(items: list[BatchItem], out_dir: Path, *, options: dict,
                finish: Callable[[BatchItem, dict], None]) -> None:
    for item in items:
        finish(item, analyse_item(item, out_dir, **options))


# --------------------------------------------------------------------------- Dask

def _absolute(item: BatchItem) -> BatchItem:
    """``item`` with absolute paths (clip, wavelength log), for workers in other folders."""
    log = item.settings.wavelength_log
    settings = item.settings.replace(wavelength_log=str(Path(log).absolute())) if log else item.settings
    return dataclasses.replace(item, clip=item.clip.absolute(), settings=settings)


def _dask_failure(exc: BaseException) -> str:
    if type(exc).__name__ == "KilledWorker":
        return ("every Dask worker that ran this clip died (KilledWorker); the clip may crash its decoder "
                "or exhaust memory: run fringecount count on it alone to see")
    return _one_line(f"the Dask task for this clip failed ({type(exc).__name__}: {exc})")


def _run_dask(items: list[BatchItem], out_dir: Path, *, address: Any, connect_timeout_s: float, options: dict,
              finish: Callable[[BatchItem, dict], None]) -> None:
    """Run each clip as one task on a Dask distributed cluster (scheduler at ``address``)."""
    try:
        from distributed import Client, as_completed
    except ImportError:
        raise InputError("--dask needs the Dask distributed package; install it with "
                         "pip install 'fringecount[cluster]'") from None
    own_client = not isinstance(address, Client)
    if own_client:
        try:
            client = Client(address, timeout=connect_timeout_s, set_as_default=False)
        except (OSError, TimeoutError, ValueError) as exc:
            raise InputError(f"cannot reach the Dask scheduler at {address} ({_one_line(exc)}); "
                             "check the address (e.g. tcp://host:8786) and that the scheduler runs") from None
    else:
        client = address
    futures: dict[Any, BatchItem] = {}
    out_dir = out_dir.absolute()  # workers do not share this process's working folder

    def submit(item: BatchItem):
        future = client.submit(analyse_item, _absolute(item), out_dir, **options, pure=False,
                               key=f"fringecount-batch-{item.result_name}-{uuid.uuid4().hex}")
        futures[future] = item
        return future

    def outcome_of(future) -> dict:
        try:
            return future.result()
        except Exception as exc:  # noqa: BLE001 - KilledWorker, lost worker, cancelled...
            return {"status": "error", "elapsed_s": None, "reused": False, "error": _dask_failure(exc),
                    "killed_worker": type(exc).__name__ == "KilledWorker"}

    try:
        suspects: list[BatchItem] = []
        with client.as_current():
            for future in as_completed([submit(item) for item in items]):
                item = futures.pop(future)
                outcome = outcome_of(future)
                if outcome.pop("killed_worker", False):
                    suspects.append(item)  # maybe it only shared the worker with a crashing clip
                else:
                    finish(item, outcome)
        # Dask counts every task on a worker that died as suspect; run those again one at
        # a time, so that a clip that only shared a worker with a crashing one completes.
        for item in suspects:
            future = submit(item)
            outcome = outcome_of(future)
            futures.pop(future)
            outcome.pop("killed_worker", None)
            finish(item, outcome)
    finally:
        if futures:
            client.cancel(list(futures))
        if own_client:
            client.close()


# --------------------------------------------------------------------------- the batch

def _rows_from_disk(items: list[BatchItem], rows: dict[str, dict], out_dir: Path) -> None:
    """Add rows for clips without one whose complete result is on disk."""
    for item in items:
        folder = out_dir / item.result_name
        if item.name in rows or not (folder / _SUMMARY).exists():
            continue
        try:
            summary = _read_summary(folder)
        except (OSError, ValueError):
            continue
        rows[item.name] = _row(item, {"status": "ok", "summary": summary, "reused": False, "elapsed_s": None})


def available_cores() -> int:
    """CPU cores this process may run on (the default number of local jobs)."""
    try:
        return len(os.sched_getaffinity(0)) or 1
    except AttributeError:  # pragma: no cover - not Linux
        return os.cpu_count() or 1


@dataclass(frozen=True)
class BatchReport:
    """What :func:`run_batch` did.

    Attributes
    ----------
    table : pandas.DataFrame
        One row per clip, columns :data:`BATCH_COLUMNS`, in batch order.
    out_dir : pathlib.Path
        The output folder.
    written : tuple of pathlib.Path
        The batch tables written (``batch.csv``, ``batch.parquet``).
    """

    table: pd.DataFrame
    out_dir: Path
    written: tuple[Path, ...]

    @property
    def n_failed(self) -> int:
        """Number of clips with status ``error``."""
        return int((self.table["status"] != "ok").sum())

    @property
    def n_ok(self) -> int:
        """Number of clips with status ``ok``."""
        return int((self.table["status"] == "ok").sum())


def run_batch(source: str | os.PathLike | list[BatchItem], out_dir: str | os.PathLike, *,
              settings: CountSettings | None = None, jobs: int | None = None, force: bool = False,
              report: bool = False, dask: Any = None, dask_timeout_s: float = 20.0, timeout_s: float | None = None,
              analyse: Callable | None = None,
              progress: Callable[[dict], None] | None = None,
              flush_every_s: float = 10.0) -> BatchReport:
    """Analyse every clip of a batch into its own result folder under ``out_dir``.

    Parameters
    ----------
    source : path or list of BatchItem
        A folder of clips, a manifest (``.csv``/``.toml``) or a planned batch
        (:func:`plan_batch`).
    out_dir : path
        Output folder; created if needed. Each clip's result goes to
        ``out_dir / result_folder_name(clip)``; the table to ``out_dir/batch.csv``
        (and ``batch.parquet`` when pyarrow is installed).
    settings : CountSettings, optional
        Settings every clip starts from (a manifest overrides them per clip).
    jobs : int, optional
        Local worker processes at once (default: :func:`available_cores`). Each
        clip runs in a fresh process, so a crash loses only that clip. ``0`` runs
        the clips one by one in this process, without that isolation (debugging).
    force : bool
        Re-analyse clips that already have a complete result (replacing it atomically).
    report : bool
        Also write each new result's ``report.png``/``report.html`` (as ``count --report``).
    dask : str or distributed.Client, optional
        Run on a Dask distributed cluster instead: the scheduler address
        (``tcp://host:8786``) or a connected client. Clips and ``out_dir`` must be
        reachable from every worker under the same paths.
    dask_timeout_s : float
        How long to try to reach the Dask scheduler (s).
    timeout_s : float, optional
        Local runs: stop a clip's worker after this many seconds (an ``error`` row).
    analyse : callable, optional
        ``analyse(clip_path, settings) -> CountResult`` (default
        :func:`fringecount.pipeline.count`). Must be picklable (a module-level
        function) for process and Dask runs.
    progress : callable, optional
        Called with each clip's row (a dict) as it is finished or found done.
    flush_every_s : float
        Rewrite the batch table at most this often while the batch runs (s).

    Returns
    -------
    BatchReport

    Raises
    ------
    InputError
        Bad source, manifest or options, or another batch writing into ``out_dir``.
        Problems with single clips never raise: they become ``error`` rows.

    Notes
    -----
    Clips with a complete result (its ``summary.json`` exists) are skipped unless
    ``force``: their files are not touched and their rows are rebuilt from
    ``summary.json`` (``reused`` is true, ``elapsed_s`` empty; ``settings_changed``
    is true when the result was made with other settings). Failed clips have
    no result folder, so a rerun tries them again. The table is written
    atomically, also when the batch is interrupted (rows of finished clips only).
    """
    out_dir = Path(out_dir)
    if jobs is None:
        jobs = available_cores()
    if not isinstance(jobs, int) or jobs < 0:
        raise InputError(f"jobs must be a whole number >= 1 (or 0 for in-process), got {jobs!r}")
    if timeout_s is not None and not (math.isfinite(timeout_s) and timeout_s > 0):
        raise InputError(f"timeout must be a positive number of seconds, got {timeout_s!r}")
    if out_dir.exists() and not out_dir.is_dir():
        raise InputError(f"{out_dir} exists and is not a folder; choose another --out")
    if isinstance(source, (str, os.PathLike)):
        items = plan_batch(source, settings=settings, exclude=[out_dir])
    else:
        items = list(source)
    if not items:
        raise InputError("the batch has no clips; give a folder of clips or a manifest")
    names: dict[str, str] = {}
    for item in items:
        if item.result_name in names:
            raise InputError(f"clips {names[item.result_name]!r} and {item.name!r} map to one result folder; "
                             "list each clip once")
        names[item.result_name] = item.name

    out_dir.mkdir(parents=True, exist_ok=True)
    options = {"force": force, "report": report, "analyse": analyse}
    rows: dict[str, dict] = {}
    order = {item.name: i for i, item in enumerate(items)}
    last_flush = time.monotonic()
    written: list[Path] = []

    def current_table() -> pd.DataFrame:
        return _table(sorted(rows.values(), key=lambda r: order[r["clip"]]))

    def finish(item: BatchItem, outcome: dict) -> None:
        nonlocal last_flush
        for message in outcome.get("warnings") or ():
            logger.warning("%s: %s", item.name, message)
        if outcome["status"] != "ok":
            logger.info("%s: %s", item.name, outcome.get("error"))
        row = _row(item, outcome)
        rows[item.name] = row
        if progress is not None:
            progress(row)
        if time.monotonic() - last_flush >= flush_every_s:
            _write_table(current_table(), out_dir)
            last_flush = time.monotonic()

    with _exclusive(out_dir):
        clean_stale_staging(out_dir)
        todo: list[BatchItem] = []
        for item in items:
            folder = out_dir / item.result_name
            if not force and (folder / _SUMMARY).exists():
                try:
                    summary = _read_summary(folder)
                except (OSError, ValueError) as exc:
                    finish(item, {"status": "error", "reused": True, "elapsed_s": None,
                                  "error": _one_line(f"the existing result's summary.json is unreadable "
                                                     f"({exc}); rerun with --force")})
                    continue
                finish(item, {"status": "ok", "summary": summary, "reused": True, "elapsed_s": None})
            else:
                todo.append(item)
        logger.info("%d clip(s) to analyse, %d already done", len(todo), len(items) - len(todo))
        try:
            if todo and dask is not None:
                _run_dask(todo, out_dir, address=dask, connect_timeout_s=dask_timeout_s, options=options,
                          finish=finish)
            elif todo and jobs == 0:
                _run_inline(todo, out_dir, options=options, finish=finish)
            elif todo:
                _run_local(todo, out_dir, jobs=min(jobs, len(todo)), options=options, timeout_s=timeout_s,
                           finish=finish)
                clean_stale_staging(out_dir)  # a worker stopped mid-write leaves its staging folder
        finally:
            if not force:  # interrupted: results that landed before their worker could report
                _rows_from_disk(items, rows, out_dir)
            if rows:
                written = _write_table(current_table(), out_dir)
    return BatchReport(current_table(), out_dir, tuple(written))
