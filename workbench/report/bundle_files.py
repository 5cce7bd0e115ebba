"""How a model bundle's files are held: JSON values, and the folder or .zip on disk.

:func:`_jsonable` turns a bundle's records into JSON values (non-finite numbers to null)
and :func:`_no_constants` refuses NaN / Infinity when reading one back; :func:`_reader`
opens a bundle folder or .zip for reading by member name (names that climb out of the
bundle are refused), and :func:`_write` writes the files of a new bundle, replacing an
old bundle only when asked. The format itself is in :mod:`workbench.report.bundle`.
"""

from __future__ import annotations

import shutil
import zipfile
from pathlib import Path, PurePosixPath

import numpy as np

from workbench.errors import BundleError

MANIFEST = "manifest.json"


def _jsonable(v):
    if isinstance(v, dict):
        return {str(k): _jsonable(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_jsonable(x) for x in v]
    if isinstance(v, np.generic):
        v = v.item()
    if isinstance(v, float) and not np.isfinite(v):
        return None
    return v


def _no_constants(name: str):
    raise ValueError(f"{name} is not allowed in a bundle")


def _safe_name(name: str) -> bool:
    p = PurePosixPath(name)
    return bool(name) and not p.is_absolute() and ".." not in p.parts and "\\" not in name


def _reader(path: Path):
    if not path.exists():
        raise BundleError(f"{path}: no bundle here; give the folder or .zip written by save_bundle.")
    if path.is_dir():
        def read(name: str) -> bytes:
            if not _safe_name(name) or not (path / name).is_file():
                raise BundleError(f"{path}: the bundle lacks {name}; it is incomplete.")
            return (path / name).read_bytes()
        return read
    if not zipfile.is_zipfile(path):
        raise BundleError(f"{path} is neither a bundle folder nor a .zip file.")
    with zipfile.ZipFile(path) as zf:
        members = {i.filename: zf.read(i) for i in zf.infolist() if not i.is_dir() and _safe_name(i.filename)}

    def read_zip(name: str) -> bytes:
        if name not in members:
            raise BundleError(f"{path}: the bundle lacks {name}; it is incomplete.")
        return members[name]
    return read_zip


def _write(files: dict[str, bytes], path: Path, overwrite: bool) -> None:
    if path.suffix.lower() == ".zip":
        if path.exists() and not overwrite:
            raise BundleError(f"{path} exists already; choose another name or pass overwrite=True.")
        path.parent.mkdir(parents=True, exist_ok=True)
        with zipfile.ZipFile(path, "w", compression=zipfile.ZIP_DEFLATED) as zf:
            for name, data in sorted(files.items()):
                zf.writestr(name, data)
        return
    if path.exists() and (not path.is_dir() or any(path.iterdir())):
        if not (overwrite and path.is_dir() and (path / MANIFEST).is_file()):
            raise BundleError(
                f"{path} exists and is not empty; choose a new folder, or pass overwrite=True to replace "
                "a bundle saved there before."
            )
        (path / MANIFEST).unlink()
        shutil.rmtree(path / "models", ignore_errors=True)
    for name, data in files.items():
        target = path / name
        target.parent.mkdir(parents=True, exist_ok=True)
        target.write_bytes(data)
