"""HDF5 checkpoint files: self-describing, checksummed, written atomically.

Layout (readable with plain h5py or ``h5dump``)::

    /                      attrs: format="rntn_engine checkpoint", format_version, written_utc
    /arrays/<group>/<name> numeric datasets; attrs: sha256 (of the C-order bytes), dtype, description
    /words/<name>          UTF-8 string datasets (e.g. the vocabulary); attrs: sha256 (of the
                           words joined by NUL), description
    /records/<name>        one UTF-8 JSON text each (config, run state, metrics, data hashes,
                           library versions); attrs: sha256 (of the UTF-8 text), description

Writing (:func:`write_checkpoint`): the whole HDF5 file is built in memory, then
written by data/atomic_files.py (a temporary file in the target directory, fsync,
rename over the final name, fsync of the directory; the rename is the commit point).
HDF5 itself therefore never touches the disk while writing: a full disk or a file-size
limit surfaces as one OSError from a plain write or fsync, the temporary file is
removed, and what was there before stays untouched. The price is one extra copy of the
checkpoint in memory while it is written. No file is ever updated in place, and
nothing is pickled.

Reading (:func:`read_checkpoint`) verifies every checksum; any open or read
problem raises :class:`CheckpointError` naming the file and the dataset.
"""

from __future__ import annotations

import fcntl
import hashlib
import io
import json
import os
import stat
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import h5py
import numpy as np

from rntn_engine.data.atomic_files import FaultHook, write_atomically
from rntn_engine.data.errors import InputError

FORMAT_NAME = "rntn_engine checkpoint"
FORMAT_VERSION = 2  # 2: descriptive dataset names (word_vectors, ...); version 1 files are not read


class CheckpointError(InputError):
    """A checkpoint file that is damaged or not ours: its format, structure, content or a checksum is wrong.

    Only this error lets a run set a checkpoint aside (renamed ``*.damaged``) and use an older one.
    """


class CheckpointUnavailableError(InputError):
    """A checkpoint that cannot be read now (busy, no permission, I/O error, out of memory): maybe intact."""


@dataclass
class CheckpointContent:
    """What a checkpoint holds: numeric arrays, word lists and JSON records, each with a description."""

    arrays: dict[str, np.ndarray] = field(default_factory=dict)  # "group/name" -> array
    words: dict[str, list[str]] = field(default_factory=dict)  # name -> list of strings
    records: dict[str, object] = field(default_factory=dict)  # name -> JSON-serialisable value
    descriptions: dict[str, str] = field(default_factory=dict)  # "arrays/group/name" etc. -> text
    format_version: int = FORMAT_VERSION


def _sha256(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def array_checksum(a: np.ndarray) -> str:
    """SHA-256 of the array's C-order bytes, hashed in place (no copy of a large array)."""
    contiguous = np.ascontiguousarray(a)
    return hashlib.sha256(contiguous.reshape(-1).view(np.uint8)).hexdigest()


def words_checksum(words: list[str]) -> str:
    return _sha256("\0".join(words).encode("utf-8"))


def checkpoint_image(content: CheckpointContent) -> io.BytesIO:
    """The complete HDF5 file of ``content``, built in memory (no disk I/O)."""
    image = io.BytesIO()
    # File format of HDF5 1.8 at the newest: its superblock has no "open for writing" flag, so a file that
    # another program once opened for writing and died holding stays readable (the newer format refuses it)
    with h5py.File(image, "w", libver=("earliest", "v108")) as f:
        f.attrs["format"] = FORMAT_NAME
        f.attrs["format_version"] = content.format_version
        f.attrs["written_by"] = "rntn_engine"
        for key, value in content.arrays.items():
            value = np.ascontiguousarray(value)
            ds = f.create_dataset(f"arrays/{key}", data=value)
            ds.attrs["sha256"] = array_checksum(value)
            ds.attrs["description"] = content.descriptions.get(f"arrays/{key}", "")
        for key, words in content.words.items():
            ds = f.create_dataset(f"words/{key}", data=np.array(words, dtype=object),
                                  dtype=h5py.string_dtype("utf-8"))
            ds.attrs["sha256"] = words_checksum(list(words))
            ds.attrs["description"] = content.descriptions.get(f"words/{key}", "")
        for key, value in content.records.items():
            text = json.dumps(value, sort_keys=True, ensure_ascii=False)
            ds = f.create_dataset(f"records/{key}", data=text, dtype=h5py.string_dtype("utf-8"))
            ds.attrs["sha256"] = _sha256(text.encode("utf-8"))
            ds.attrs["description"] = content.descriptions.get(f"records/{key}", "")
    return image


def write_checkpoint(path: Path | str, content: CheckpointContent, fault: FaultHook | None = None) -> None:
    """Write ``content`` to ``path`` atomically (see module docstring). Raises OSError on failure."""
    write_atomically(Path(path), checkpoint_image(content).getbuffer(), durable=True, fault=fault)


def _fail(path: Path, what: str) -> CheckpointError:
    return CheckpointError(str(path), what)


# Records a checkpoint may hold (JSON text each), and the one word list.
RECORD_NAMES = ("config", "vocabulary_options", "state", "metrics", "data_hashes", "versions")
WORD_LISTS = ("vocabulary",)

# The arrays a checkpoint holds, given its records and its vocabulary size: "group/name" -> (shape, dtype),
# with the groups that may be absent as a whole (every array of such a group, or none). Supplied by the
# caller (run/checkpoints.py), which knows the models.
ArrayShapes = dict[str, tuple[tuple[int, ...], np.dtype]]
ArrayLayout = Callable[[dict, int], tuple[ArrayShapes, tuple[str, ...]]]


def _open_for_reading(path: Path) -> int:
    """A file descriptor of ``path``, checked to be a regular file that no writer holds locked.

    Raises CheckpointUnavailableError when the file cannot be read now (missing, busy, no
    permission, not a regular file such as a FIFO, an I/O error): nothing says it is damaged.
    """
    try:
        info = os.stat(path)
    except FileNotFoundError:
        raise CheckpointUnavailableError(str(path), "no such checkpoint file") from None
    except OSError as exc:
        raise CheckpointUnavailableError(str(path), f"cannot read it: {exc.strerror or exc}") from None
    if not stat.S_ISREG(info.st_mode):
        raise CheckpointUnavailableError(str(path), "not a regular file (a checkpoint is a plain HDF5 file)")
    try:
        fd = os.open(path, os.O_RDONLY | os.O_NONBLOCK | getattr(os, "O_CLOEXEC", 0))
    except OSError as exc:
        raise CheckpointUnavailableError(str(path), f"cannot read it: {exc.strerror or exc}") from None
    try:
        fcntl.flock(fd, fcntl.LOCK_SH | fcntl.LOCK_NB)  # HDF5 writers hold an exclusive flock
    except BlockingIOError:
        os.close(fd)
        raise CheckpointUnavailableError(str(path), "another process holds it open for writing; wait for it to "
                                                    "close the file (on network filesystems where HDF5 file "
                                                    "locking fails, set HDF5_USE_FILE_LOCKING=FALSE)") from None
    except OSError:
        pass  # a filesystem without flock: nothing to learn here
    return fd


def _check_storage(path: Path, name: str, ds: "h5py.Dataset", file_size: int) -> None:
    """Refuse storage that reads other files or costs more than the file holds, before reading any data."""
    if ds.is_virtual:
        raise _fail(path, f"dataset /{name} is a virtual dataset (it would read other files); not ours")
    if ds.external:
        raise _fail(path, f"dataset /{name} keeps its data in external files; not ours")
    if ds.chunks is not None or ds.compression is not None:
        raise _fail(path, f"dataset /{name} is chunked or compressed; ours are stored contiguous")
    declared = int(ds.size) * (ds.dtype.itemsize if ds.dtype.kind not in "OSU" else 16)
    if declared > file_size:
        raise _fail(path, f"dataset /{name} declares {declared:,} bytes, more than the file's {file_size:,}")


def _links(path: Path, f: "h5py.File") -> dict[str, "h5py.Dataset"]:
    """Every dataset by its full name, refusing links to other files and anything outside our layout."""
    found: dict[str, h5py.Dataset] = {}
    stack = [("", f)]
    while stack:
        prefix, group = stack.pop()
        for key in group:
            name = f"{prefix}{key}"
            link = group.get(key, getlink=True)
            if isinstance(link, h5py.ExternalLink):
                raise _fail(path, f"/{name} is a link to another file; not ours")
            if isinstance(link, h5py.SoftLink):
                raise _fail(path, f"/{name} is a soft link; not ours")
            obj = group[key]
            if isinstance(obj, h5py.Group):
                if prefix == "" and key not in ("arrays", "words", "records") or prefix.count("/") > 1:
                    raise _fail(path, f"unexpected group /{name}")
                stack.append((name + "/", obj))
            else:
                top = name.partition("/")[0]
                allowed = (top == "arrays" and name.count("/") == 2
                           or top == "words" and name in {f"words/{w}" for w in WORD_LISTS}
                           or top == "records" and name in {f"records/{r}" for r in RECORD_NAMES})
                if not allowed:
                    raise _fail(path, f"unexpected dataset /{name}")
                found[name] = obj
    return found


def _text(value: object) -> str:
    return value.decode("utf-8") if isinstance(value, bytes) else str(value)


def read_checkpoint(path: Path | str, layout: ArrayLayout | None = None, verify: bool = True) -> CheckpointContent:
    """Read and verify a checkpoint, distrusting the file.

    Structure first, data after: the file must be a regular HDF5 file of our format and
    version whose datasets are all in our layout, stored in the file itself (no virtual
    datasets, external storage or links) and no larger than the file. The records and the
    vocabulary are read and verified next; then ``layout`` (given them) says which arrays must
    exist with which shape and dtype, and any missing, unexpected or misshapen array refuses
    the file before a byte of array data is read. Every checksum is verified.

    Raises :class:`CheckpointError` (damaged or not ours: format, checksum, structure, content)
    or :class:`CheckpointUnavailableError` (cannot be read now: busy, permission, I/O, memory).
    """
    path = Path(path)
    fd = _open_for_reading(path)
    content = CheckpointContent()
    try:
        file_size = os.fstat(fd).st_size
        try:
            f = h5py.File(path, "r", locking=False)
        except OSError as exc:
            raise _fail(path, f"not a readable HDF5 checkpoint: {str(exc).splitlines()[0]}") from None
        with f:
            if _text(f.attrs.get("format", "")) != FORMAT_NAME:
                raise _fail(path, f"not an rntn_engine checkpoint (format attribute {f.attrs.get('format')!r})")
            content.format_version = int(f.attrs.get("format_version", -1))
            if content.format_version != FORMAT_VERSION:
                raise _fail(path, f"checkpoint format version {content.format_version}, this program reads "
                                  f"version {FORMAT_VERSION}: use the rntn_engine release that wrote it")
            datasets = _links(path, f)
            for name, ds in datasets.items():
                _check_storage(path, name, ds, file_size)

            def verified(name: str, got: str) -> None:
                if verify and got != _text(datasets[name].attrs.get("sha256", "")):
                    raise _fail(path, f"checksum mismatch in dataset /{name}: the file is damaged")
                content.descriptions[name] = _text(datasets[name].attrs.get("description", ""))

            for name in sorted(n for n in datasets if n.startswith("records/")):
                ds = datasets[name]
                if ds.shape != () or ds.dtype.kind not in "OS":
                    raise _fail(path, f"dataset /{name} is not one JSON text")
                text = _text(ds[()])
                verified(name, _sha256(text.encode("utf-8")))
                try:
                    content.records[name.partition("/")[2]] = json.loads(text)
                except ValueError as exc:
                    raise _fail(path, f"dataset /{name} is not valid JSON: {exc}") from None
            for name in sorted(n for n in datasets if n.startswith("words/")):
                ds = datasets[name]
                if ds.ndim != 1 or ds.dtype.kind not in "OS":
                    raise _fail(path, f"dataset /{name} is not a list of words")
                words = [_text(w) for w in ds[()]]
                verified(name, words_checksum(words))
                content.words[name.partition("/")[2]] = words
            arrays = {n.partition("/")[2]: ds for n, ds in datasets.items() if n.startswith("arrays/")}
            if layout is not None:
                try:
                    expected, optional = layout(content.records, len(content.words.get("vocabulary", [])))
                except (KeyError, TypeError, ValueError) as exc:
                    raise _fail(path, f"stored description of the model is not valid: {exc}") from None
                for group in optional:  # all of the group's arrays, or none
                    if not any(key.startswith(group + "/") for key in arrays):
                        expected = {k: v for k, v in expected.items() if not k.startswith(group + "/")}
                for key in sorted(set(expected) - set(arrays)):
                    raise _fail(path, f"dataset /arrays/{key} is missing")
                for key in sorted(set(arrays) - set(expected)):
                    raise _fail(path, f"unexpected dataset /arrays/{key}")
                for key, (shape, dtype) in expected.items():
                    if arrays[key].shape != tuple(shape) or arrays[key].dtype != dtype:
                        raise _fail(path, f"dataset /arrays/{key} is {arrays[key].shape} {arrays[key].dtype}, "
                                          f"expected {tuple(shape)} {np.dtype(dtype)}")
            for key, ds in arrays.items():
                value = ds[()]
                verified(f"arrays/{key}", array_checksum(value))
                content.arrays[key] = value
    except (CheckpointError, CheckpointUnavailableError):
        raise
    except MemoryError:
        raise CheckpointUnavailableError(str(path), "not enough memory to read it") from None
    except Exception as exc:  # h5py raises OSError, KeyError, ValueError... on damaged files
        first = (str(exc).splitlines() or [type(exc).__name__])[0]
        raise _fail(path, f"damaged checkpoint ({type(exc).__name__}: {first})") from None
    finally:
        os.close(fd)
    return content
