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

import hashlib
import io
import json
from dataclasses import dataclass, field
from pathlib import Path

import h5py
import numpy as np

from rntn_engine.data.atomic_files import FaultHook, write_atomically
from rntn_engine.data.errors import InputError

FORMAT_NAME = "rntn_engine checkpoint"
FORMAT_VERSION = 2  # 2: descriptive dataset names (word_vectors, ...); version 1 files are not read


class CheckpointError(InputError):
    """A checkpoint file that cannot be read, or whose content fails verification."""


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
    with h5py.File(image, "w", libver="latest") as f:
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


def read_checkpoint(path: Path | str, verify: bool = True) -> CheckpointContent:
    """Read and verify a checkpoint; raise :class:`CheckpointError` naming the file and dataset."""
    path = Path(path)
    try:
        f = h5py.File(path, "r")
    except FileNotFoundError:
        raise _fail(path, "no such checkpoint file") from None
    except OSError as exc:
        hint = ""
        if "lock" in str(exc).lower():
            hint = " (on network filesystems set HDF5_USE_FILE_LOCKING=FALSE)"
        raise _fail(path, f"not a readable HDF5 checkpoint: {str(exc).splitlines()[0]}{hint}") from None
    content = CheckpointContent()
    try:
        with f:
            if f.attrs.get("format") != FORMAT_NAME:
                raise _fail(path, f"not an rntn_engine checkpoint (format attribute {f.attrs.get('format')!r})")
            content.format_version = int(f.attrs.get("format_version", -1))
            if content.format_version != FORMAT_VERSION:
                raise _fail(path, f"checkpoint format version {content.format_version}, this program reads "
                                  f"version {FORMAT_VERSION}: use the rntn_engine release that wrote it")
            names: list[str] = []
            f.visit(names.append)
            for name in names:
                obj = f[name]
                if not isinstance(obj, h5py.Dataset):
                    continue
                top, _, key = name.partition("/")
                expected = obj.attrs.get("sha256")
                desc = obj.attrs.get("description", "")
                if top == "arrays":
                    value = obj[()]
                    got = array_checksum(value)
                    content.arrays[key] = value
                elif top == "words":
                    value = [w.decode("utf-8") if isinstance(w, bytes) else str(w) for w in obj[()]]
                    got = words_checksum(value)
                    content.words[key] = value
                elif top == "records":
                    raw = obj[()]
                    text = raw.decode("utf-8") if isinstance(raw, bytes) else str(raw)
                    got = _sha256(text.encode("utf-8"))
                    content.records[key] = json.loads(text)
                else:
                    continue
                if verify and got != expected:
                    raise _fail(path, f"checksum mismatch in dataset /{name}: the file is damaged")
                content.descriptions[name] = desc.decode() if isinstance(desc, bytes) else str(desc)
    except CheckpointError:
        raise
    except Exception as exc:  # h5py raises OSError, KeyError, ValueError... on damaged files
        first = (str(exc).splitlines() or [type(exc).__name__])[0]
        raise _fail(path, f"damaged checkpoint ({type(exc).__name__}: {first})") from None
    return content
