"""Vector files whose headers lie, and vocabularies that no vector file can hold.

A compressed file whose header declares one enormous vector is refused at the header, so
memory stays bounded whatever the header says (measured in a fresh process from its peak
resident size). Words holding whitespace or control characters cannot be exported as one
field: one line, no traceback.
"""

import gzip
import subprocess
import sys
import zlib

import numpy as np
import pytest

from rntn_engine.cli.app import main
from rntn_engine.data.word_vector_writers import write_word2vec_binary, write_word2vec_text
from rntn_engine.data.errors import VectorFileError
from rntn_engine.data.word_vectors import read_top_words

PROBE = """
import sys
from rntn_engine.data.word_vectors import read_top_words
try:
    read_top_words(sys.argv[1], 1)
except Exception as exc:
    print(type(exc).__name__, exc)
for line in open('/proc/self/status'):
    if line.startswith('VmHWM:'):
        print('peak_kb', line.split()[1])
"""


def gzip_bomb(path, dim):
    """A gzip file: header '1 DIM', a word, then DIM float32 zeros (compressing about 1000:1)."""
    compressor = zlib.compressobj(9, zlib.DEFLATED, 31)  # 31: gzip container
    with open(path, "wb") as fh:
        fh.write(compressor.compress(f"1 {dim}\nfern ".encode()))
        zeros = bytes(1 << 22)
        for _ in range(dim * 4 // len(zeros)):
            fh.write(compressor.compress(zeros))
        fh.write(compressor.flush())


def test_a_header_declaring_a_huge_vector_is_refused_before_reading_it(tmp_path):
    path = tmp_path / "bomb.w2v.gz"
    gzip_bomb(path, 100 * 2**20)  # one row of 400 MiB of zeros in a file of about 0.4 MB
    assert path.stat().st_size < 2 * 2**20
    done = subprocess.run([sys.executable, "-c", PROBE, str(path)], capture_output=True, text=True, timeout=120)
    lines = done.stdout.splitlines()
    assert lines[0].startswith("VectorFileError") and "values per vector" in lines[0], done.stdout + done.stderr
    peak_mb = int(lines[1].split()[1]) / 1024
    assert peak_mb < 300, f"peak resident memory {peak_mb:.0f} MB while refusing a 400 MiB row"


def test_the_largest_allowed_vector_still_reads(tmp_path):
    path = tmp_path / "wide.w2v"
    vectors = np.random.default_rng(0).standard_normal((2, 65_536)).astype(np.float32)
    write_word2vec_binary(path, ["moss", "fern"], vectors)
    top = read_top_words(path, 2)
    assert top.dim == 65_536 and list(top.words) == ["moss", "fern"]
    with gzip.open(tmp_path / "too-wide.gz", "wb") as fh:
        fh.write(b"1 65537\nmoss " + bytes(4 * 65_537) + b"\n")
    with pytest.raises(VectorFileError, match="65,537 values per vector"):
        read_top_words(tmp_path / "too-wide.gz", 1)


@pytest.mark.parametrize("word", ["palm\u00a0house", "fern\x07", "moss\u2028glade", "a b", ""])
def test_a_word_no_vector_file_can_hold_is_refused_by_the_writer(tmp_path, word):
    with pytest.raises(ValueError, match="word 1 .*(holds U\\+|is empty)"):
        write_word2vec_text(tmp_path / "v.txt", ["ok", word], np.zeros((2, 3)))
    assert not list(tmp_path.iterdir())


def test_export_vectors_refuses_such_a_word_in_one_line(tmp_path, capsys):
    from demo_slices import write_demo_slices

    from rntn_engine.data.vocabulary import Vocabulary
    from rntn_engine.run.checkpoints import load_checkpoint, save_checkpoint

    write_demo_slices(tmp_path, 20)
    assert main(["train", "--train-file", str(tmp_path / "train.trees"), "--dim", "3", "--epochs", "0",
                 "--run-dir", str(tmp_path / "run"), "--no-progress"]) == 0
    c = load_checkpoint(tmp_path / "run" / "model.h5")
    words = list(c.vocabulary.words)
    words[3] = "glass\u00a0house"  # a tree token may hold a no-break space; vector files cannot
    odd = tmp_path / "odd.h5"
    save_checkpoint(odd, c.params, Vocabulary(tuple(words), False, 2), c.config, c.adagrad_sums, c.state)
    assert main(["export-vectors", str(odd), str(tmp_path / "out.txt")]) == 1
    err = capsys.readouterr().err
    assert "word 3 'glass\\xa0house' holds U+00A0" in err and len(err.strip().splitlines()) == 1
    assert not (tmp_path / "out.txt").exists()


def test_export_vectors_refuses_to_overwrite_its_own_checkpoint(tmp_path, capsys):
    from demo_slices import write_demo_slices

    write_demo_slices(tmp_path, 20)
    assert main(["train", "--train-file", str(tmp_path / "train.trees"), "--dim", "3", "--epochs", "0",
                 "--run-dir", str(tmp_path / "run"), "--no-progress"]) == 0
    model = tmp_path / "run" / "model.h5"
    before = model.read_bytes()
    assert main(["export-vectors", str(model), str(model)]) == 1
    assert "is the checkpoint being read" in capsys.readouterr().err
    assert model.read_bytes() == before
