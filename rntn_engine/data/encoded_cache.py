"""Encoded treebanks kept on disk, so that resuming a run on a large treebank skips reading its text.

An entry is a directory ``<cache_dir>/<name>-<key>/`` holding one ``.npy`` file per column of
the :class:`EncodedTreebank` (plain arrays, no pickle) and ``manifest.json``, which records the
key's parts and the SHA-256 of every column file.

* Key: SHA-256 of the format version, the treebank file's own SHA-256, the binarisation
  mode, the number of classes and the vocabulary (its words in order, and lowercasing).
  A change to any of them gives another key, so a stale entry is never used.
* Written atomically: the entry is built in a temporary directory named as every temporary
  of this program is (data/atomic_files.py: ``.<entry>.<pid>.rntn-tmp``), its files fsynced,
  then renamed into place and the directory fsynced; other entries of the same name (stale
  keys) and leftovers of interrupted writes of that name are removed then, so a cache
  directory holds one entry per name: its size is that of the encoded treebanks (about 9
  bytes a node).
* Verified on load: every column file is hashed and compared with the manifest, and the
  arrays' shapes and dtypes are checked. A damaged or incomplete entry is removed and the
  caller reads the treebank again (and writes a new entry).
* Loaded memory-mapped and read-only: the operating system shares the pages and can drop
  them under memory pressure.
"""

from __future__ import annotations

import hashlib
import json
import os
import re
import shutil
from pathlib import Path

import numpy as np

from rntn_engine.data.atomic_files import TEMP_PATTERN, fsync_directory, temp_name_for
from rntn_engine.data.batches import CHILD_DTYPES, LABEL_DTYPES, EncodedTreebank
from rntn_engine.data.vocabulary import Vocabulary

FORMAT = "rntn_engine encoded treebank"
FORMAT_VERSION = 1
MANIFEST = "manifest.json"
COLUMNS = ("word", "left", "right", "label", "start")
_DTYPES = {"word": (np.int32,), "left": CHILD_DTYPES, "right": CHILD_DTYPES, "label": LABEL_DTYPES,
           "start": (np.int64,)}
_NAME_RE = re.compile(r"^[A-Za-z0-9_]+$")


def cache_key(treebank_sha256: str, binarise: str, num_classes: int | None, vocabulary: Vocabulary) -> str:
    """The key of an entry (module docstring), 64 hex digits."""
    digest = hashlib.sha256()
    head = {"format": FORMAT, "version": FORMAT_VERSION, "treebank_sha256": treebank_sha256,
            "binarise": binarise, "num_classes": num_classes, "lowercase": vocabulary.lowercase,
            "vocabulary_size": len(vocabulary)}
    digest.update(json.dumps(head, sort_keys=True).encode("utf-8"))
    for word in vocabulary.words:
        digest.update(word.encode("utf-8", "surrogatepass") + b"\0")
    return digest.hexdigest()


def _entry(cache_dir: Path, name: str, key: str) -> Path:
    if not _NAME_RE.match(name):
        raise ValueError(f"cache entry names are letters, digits and '_', not {name!r}")
    return Path(cache_dir) / f"{name}-{key[:32]}"


def load_cached_bank(cache_dir: Path, name: str, key: str) -> EncodedTreebank | None:
    """The entry's bank, memory-mapped; None when there is none or it fails its checks (then it is removed)."""
    entry = _entry(cache_dir, name, key)
    if not entry.is_dir():
        return None
    try:
        manifest = json.loads((entry / MANIFEST).read_text(encoding="utf-8"))
        if manifest.get("format") != FORMAT or manifest.get("version") != FORMAT_VERSION or manifest.get("key") != key:
            raise ValueError("another format or key")
        arrays = {}
        for column in COLUMNS:
            path = entry / f"{column}.npy"
            if _file_sha256(path) != manifest["sha256"][column]:
                raise ValueError(f"{path.name} does not match its checksum")
            arrays[column] = np.load(path, mmap_mode="r", allow_pickle=False)
            if arrays[column].ndim != 1 or arrays[column].dtype.type not in _DTYPES[column]:
                raise ValueError(f"{path.name} has shape {arrays[column].shape} and dtype {arrays[column].dtype}")
        bank = EncodedTreebank(**arrays)
        n = bank.n_nodes
        if any(arrays[c].shape[0] != n for c in COLUMNS[:4]) or manifest.get("nodes") != n \
                or manifest.get("trees") != bank.n_trees:
            raise ValueError("the columns do not fit together")
        return bank
    except (OSError, ValueError, KeyError, TypeError):
        shutil.rmtree(entry, ignore_errors=True)  # damaged or incomplete: the caller builds it again
        return None


def store_cached_bank(cache_dir: Path, name: str, key: str, bank: EncodedTreebank) -> None:
    """Write the entry atomically, then remove other entries of ``name`` and leftovers of interrupted writes."""
    entry = _entry(cache_dir, name, key)
    cache_dir = Path(cache_dir)
    cache_dir.mkdir(parents=True, exist_ok=True)
    tmp = temp_name_for(entry)
    shutil.rmtree(tmp, ignore_errors=True)
    tmp.mkdir()
    try:
        sums = {}
        for column in COLUMNS:
            path = tmp / f"{column}.npy"
            with open(path, "wb") as fh:
                np.save(fh, np.ascontiguousarray(getattr(bank, column)), allow_pickle=False)
                fh.flush()
                os.fsync(fh.fileno())
            sums[column] = _file_sha256(path)
        manifest = {"format": FORMAT, "version": FORMAT_VERSION, "key": key, "name": name,
                    "trees": bank.n_trees, "nodes": bank.n_nodes, "sha256": sums}
        (tmp / MANIFEST).write_text(json.dumps(manifest, indent=1), encoding="utf-8")
        shutil.rmtree(entry, ignore_errors=True)
        os.replace(tmp, entry)
        fsync_directory(cache_dir)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    for other in cache_dir.iterdir():
        stale = re.fullmatch(rf"{re.escape(name)}-[0-9a-f]{{32}}", other.name) and other != entry
        temp = TEMP_PATTERN.match(other.name)
        leftover = temp is not None and re.fullmatch(rf"{re.escape(name)}-[0-9a-f]{{32}}", temp.group("final"))
        if (stale or leftover) and other.is_dir():
            shutil.rmtree(other, ignore_errors=True)


def _file_sha256(path: Path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 22), b""):
            digest.update(block)
    return digest.hexdigest()
