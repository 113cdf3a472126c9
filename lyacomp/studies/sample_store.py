"""Streaming the samples of a study to disk (.csv or .npz), one chunk at a time.

Files are written under a temporary name and moved into place when complete, so an
interrupted run never leaves a file that looks finished.
"""

from __future__ import annotations

import csv
import os
import shutil
import tempfile
import zipfile
from collections.abc import Sequence
from pathlib import Path

import numpy as np

from lyacomp.errors import StudyError


class CsvStore:
    """Streams samples to CSV, one chunk at a time; the status is written by name."""

    def __init__(self, path: Path, columns: Sequence[str], n_inputs: int, labels: dict[int, str]):
        self.path, self.n_inputs, self.labels = path, n_inputs, labels
        self.tmp = path.with_name(f".{path.name}.partial")
        self.file = self.tmp.open("w", newline="")
        self.writer = csv.writer(self.file)
        self.writer.writerow([*columns[:n_inputs], "status", *columns[n_inputs:]])

    def write(self, block: np.ndarray, status: np.ndarray) -> None:
        text = [[repr(float(v)) for v in row] for row in block.tolist()]
        names = [self.labels.get(int(c), f"status_{c}") for c in status.tolist()]
        self.writer.writerows(
            r[: self.n_inputs] + [s] + r[self.n_inputs :] for r, s in zip(text, names, strict=True)
        )

    def close(self) -> None:
        self.file.close()
        os.replace(self.tmp, self.path)

    def abort(self) -> None:
        self.file.close()
        self.tmp.unlink(missing_ok=True)


class NpzStore:
    """Streams each column to a raw file, then packs them into one .npz at the end."""

    def __init__(self, path: Path, columns: Sequence[str], n_inputs: int, labels: dict[int, str]):
        self.path, self.labels = path, labels
        self.columns = [*columns, "status"]
        self.dir = tempfile.TemporaryDirectory(prefix=".lyacomp-samples-", dir=path.parent)
        folder = Path(self.dir.name)
        self.files = [open(folder / f"{i}.raw", "wb") for i in range(len(self.columns))]
        self.rows = 0

    def write(self, block: np.ndarray, status: np.ndarray) -> None:
        for j, f in enumerate(self.files[:-1]):
            np.ascontiguousarray(block[:, j], dtype="<f8").tofile(f)
        np.asarray(status, dtype="<i4").tofile(self.files[-1])
        self.rows += len(status)

    def close(self) -> None:
        for f in self.files:
            f.close()
        tmp = self.path.with_name(f".{self.path.name}.partial")
        with zipfile.ZipFile(tmp, "w", compression=zipfile.ZIP_STORED, allowZip64=True) as zf:
            for j, name in enumerate(self.columns):
                dtype = "<i4" if name == "status" else "<f8"
                self._member(zf, name, dtype, Path(self.dir.name) / f"{j}.raw")
            codes = max(self.labels) + 1
            names = np.array([self.labels.get(i, f"status_{i}") for i in range(codes)])
            with zf.open("status_labels.npy", "w") as out:
                np.lib.format.write_array(out, names)
        os.replace(tmp, self.path)
        self.dir.cleanup()

    def _member(self, zf: zipfile.ZipFile, name: str, dtype: str, raw: Path) -> None:
        header = {"descr": dtype, "fortran_order": False, "shape": (self.rows,)}
        with zf.open(f"{name}.npy", "w", force_zip64=True) as out, raw.open("rb") as src:
            np.lib.format.write_array_header_2_0(out, header)
            shutil.copyfileobj(src, out, 1 << 22)

    def abort(self) -> None:
        for f in self.files:
            f.close()
        self.dir.cleanup()


def open_store(
    path: str | Path, columns: Sequence[str], n_inputs: int, labels: dict[int, str]
) -> CsvStore | NpzStore:
    """A writer for the samples of a study, chosen by the file name's suffix."""
    path = Path(path)
    kinds = {".csv": CsvStore, ".npz": NpzStore}
    if path.suffix.lower() not in kinds:
        raise StudyError(f"cannot save samples to '{path}': use a .csv or .npz file name")
    if not path.parent.is_dir():
        raise StudyError(f"cannot save samples to '{path}': folder '{path.parent}' does not exist")
    return kinds[path.suffix.lower()](path, columns, n_inputs, labels)
