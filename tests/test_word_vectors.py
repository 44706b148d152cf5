"""Word-vector files: detection, round trips, coverage, duplicates, top words, the matrix L, the bench script."""

from __future__ import annotations

import gzip
import importlib.util
import math
import warnings
from pathlib import Path
from unittest import mock

import numpy as np
import pytest
from hypothesis import HealthCheck, assume, example, given, settings
from hypothesis import strategies as st

from rntn_engine.data import word_vector_files
from rntn_engine.data.treebank_reader import read_trees
from rntn_engine.data.vocabulary import UNKNOWN_WORD, Vocabulary, build_vocabulary
from rntn_engine.data.word_vector_writers import write_glove_text, write_word2vec_binary, write_word2vec_text
from rntn_engine.data.word_vectors import (
    FALLBACK_HALF_WIDTH,
    DuplicateWordsWarning,
    LoadedVectors,
    load_vectors_for,
    read_top_words,
    vectors_to_matrix,
)

REPO = Path(__file__).resolve().parents[1]
WRITERS = {
    "glove": write_glove_text,
    "word2vec-text": write_word2vec_text,
    "word2vec-binary": write_word2vec_binary,
}
WORDS = ["the", "palm", "house", "café", "Fern", "grotto", ".", "orchid"]


def sample_vectors(n: int = len(WORDS), dim: int = 5, seed: int = 0) -> np.ndarray:
    return np.random.default_rng(seed).standard_normal((n, dim)).astype(np.float32)


def write(path: Path, text: str | bytes) -> Path:
    path.write_bytes(text.encode("utf-8") if isinstance(text, str) else text)
    return path


# --- formats and detection -----------------------------------------------------------------------


def test_glove_text_and_word2vec_text_are_told_apart_by_the_header(tmp_path):
    rows = "palm 0.5 -1.25 3\nfern 1e-3 2 -0\n"
    glove = load_vectors_for(write(tmp_path / "a.txt", rows), None)
    word2vec = load_vectors_for(write(tmp_path / "b.txt", "2 3\n" + rows), None)
    assert (glove.format, glove.declared_rows) == ("glove", None)
    assert (word2vec.format, word2vec.declared_rows) == ("word2vec-text", 2)
    for loaded in (glove, word2vec):
        assert loaded.words == ("palm", "fern") and loaded.dim == 3
        assert loaded.vectors.dtype == np.float32
        np.testing.assert_array_equal(loaded.vectors, np.float32([[0.5, -1.25, 3], [1e-3, 2, 0]]))
        assert loaded.rows_scanned == 2


def test_a_first_line_of_two_integers_is_a_header_unless_glove_is_forced(tmp_path):
    path = write(tmp_path / "v.txt", "2 1\n3 4\n5 6\n")  # a header, or three 1-d GloVe rows
    assert load_vectors_for(path, None).words == ("3", "5")
    forced = load_vectors_for(path, None, format="glove")
    assert forced.words == ("2", "3", "5") and forced.dim == 1


@pytest.mark.parametrize("fmt", sorted(WRITERS))
@pytest.mark.parametrize("compress", [False, True])
def test_round_trip_through_our_writers_and_reader(tmp_path, fmt, compress):
    vectors = sample_vectors()
    path = tmp_path / "vectors.out"
    WRITERS[fmt](path, WORDS, vectors, compress=compress)
    assert (path.read_bytes()[:2] == b"\x1f\x8b") == compress
    for forced in ("auto", fmt):
        loaded = load_vectors_for(path, None, format=forced)
        assert (loaded.format, loaded.compressed, loaded.dim) == (fmt, compress, 5)
        assert loaded.words == tuple(WORDS)
        np.testing.assert_array_equal(loaded.vectors, vectors)  # exact: %.9g identifies a float32


float32s = st.floats(width=32, allow_nan=False, allow_infinity=False)
# no whitespace or control characters (the writer refuses them: they separate fields for some reader),
# no lone surrogates (not UTF-8), no U+FEFF (a leading one reads as a BOM)
words = st.text(
    st.characters(blacklist_characters="\ufeff", blacklist_categories=("Cs", "Cc", "Zs", "Zl", "Zp")),
    min_size=1, max_size=8,
)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(
    rows=st.lists(
        st.tuples(words, st.lists(float32s, min_size=3, max_size=3)), min_size=1, max_size=6, unique_by=lambda r: r[0]
    ),
    fmt=st.sampled_from(sorted(WRITERS)),
)
@example(rows=[("0", [9754250833821696.0, 0.0, 0.0])], fmt="word2vec-binary")  # bytes c2 9d 0a: UTF-8, not numbers
def test_round_trip_of_any_float32_values_and_words(tmp_path, rows, fmt):
    names = [w for w, _ in rows]
    vectors = np.array([v for _, v in rows], dtype=np.float32)
    if fmt == "word2vec-binary":  # the one documented ambiguity (data/word_vector_files.py): a first row
        first = vectors[0].tobytes().split(b"\n", 1)[0]  # whose bytes before a line feed are printable ASCII
        assume(not first or any(b < 0x20 and b not in b"\t\r" or b > 0x7e for b in first))
    path = tmp_path / "any.vec"
    WRITERS[fmt](path, names, vectors)
    # a 1-value GloVe row like "2 3" would read as a header; 3 values cannot
    loaded = load_vectors_for(path, None)
    assert loaded.format == fmt and loaded.words == tuple(names)
    np.testing.assert_array_equal(loaded.vectors.view(np.uint32), vectors.view(np.uint32))


def test_gzip_is_recognised_by_its_bytes_not_its_name(tmp_path):
    rows = b"palm 1 2\nfern 3 4\n"
    compressed = write(tmp_path / "looks_plain.txt", gzip.compress(rows))
    plain = write(tmp_path / "looks_compressed.gz", rows)
    for path, is_gzip in ((compressed, True), (plain, False)):
        loaded = load_vectors_for(path, {"fern"})
        assert loaded.compressed is is_gzip and loaded.words == ("fern",)
        assert loaded.bytes_scanned == len(rows)


def test_tolerated_layouts_crlf_trailing_spaces_bom_no_final_newline(tmp_path):
    # The original C word2vec tool ends every text row with a space; Windows tools write CRLF.
    variants = [
        "2 2\npalm 1 2\nfern 3 4\n",
        "2 2\r\npalm 1 2 \r\nfern 3 4 \r\n",
        "\ufeff2 2\npalm 1 2\t\nfern 3 4",
        "2 2\npalm 1 2\nfern 3 4\n\n  \n",  # blank lines at the very end only
    ]
    for i, text in enumerate(variants):
        loaded = load_vectors_for(write(tmp_path / f"v{i}.txt", text), None)
        assert loaded.words == ("palm", "fern"), text
        np.testing.assert_array_equal(loaded.vectors, [[1, 2], [3, 4]])


@pytest.mark.parametrize("fmt", sorted(WRITERS))
@pytest.mark.parametrize("block", [1, 7, 64])
def test_tiny_blocks_give_the_same_result(tmp_path, fmt, block):
    # rows straddle every possible block boundary; lines are re-joined, binary rows refilled
    vectors = sample_vectors(len(WORDS), 4, seed=3)
    path = tmp_path / "v.bin"
    WRITERS[fmt](path, WORDS, vectors)
    wanted = {"palm", "café", "orchid", "absent"}
    expected = load_vectors_for(path, wanted)
    with mock.patch.object(word_vector_files, "BLOCK_BYTES", block):
        loaded = load_vectors_for(path, wanted)
    assert loaded.words == expected.words == ("palm", "café", "orchid")
    np.testing.assert_array_equal(loaded.vectors, expected.vectors)
    assert loaded.rows_scanned == expected.rows_scanned == len(WORDS)


def test_demo_vectors_cover_the_demo_vocabulary():
    vocabulary = build_vocabulary(read_trees(REPO / "data_demo" / "garden_train.trees"), min_count=2)
    loaded = load_vectors_for(REPO / "data_demo" / "garden_vectors_25d.glove.txt", vocabulary, expected_dim=25)
    assert loaded.format == "glove" and loaded.dim == 25
    assert loaded.coverage.wanted == len(vocabulary) - 1  # the unknown-word token is not looked up
    assert UNKNOWN_WORD not in loaded.words
    assert loaded.coverage.found > 0.9 * loaded.coverage.wanted
    assert loaded.vector_of("café") is not None  # a non-ASCII word of the demo data


# --- coverage, lowercasing, duplicates -------------------------------------------------------------


def test_coverage_sorts_words_into_exact_lowercased_and_missing(tmp_path):
    path = write(tmp_path / "v.txt", "palm 1 1\nfern 2 2\nFern 3 3\nhouse 4 4\n")
    vocabulary = Vocabulary((UNKNOWN_WORD, "Palm", "Fern", "fern", "glasshouse"))
    loaded = load_vectors_for(path, vocabulary)
    cov = loaded.coverage
    assert cov.exact == ("Fern", "fern") and cov.lowercased == ("Palm",) and cov.missing == ("glasshouse",)
    assert (cov.wanted, cov.found) == (4, 3) and math.isclose(cov.fraction_found(), 0.75)
    assert cov.status("Palm") == "lowercased" and cov.status("glasshouse") == "missing"
    assert cov.summary() == "3 of 4 words found (2 exactly, 1 after lowercasing), 1 missing"
    assert loaded.words == ("palm", "fern", "Fern")  # file order; "house" was not wanted
    np.testing.assert_array_equal(loaded.vector_of("Palm"), [1, 1])
    np.testing.assert_array_equal(loaded.vector_of("Fern"), [3, 3])

    strict = load_vectors_for(path, vocabulary, lowercase_fallback=False)
    assert strict.coverage.lowercased == () and strict.coverage.missing == ("Palm", "glasshouse")
    assert strict.vector_of("Palm") is None and strict.words == ("fern", "Fern")


def test_lowercase_forms_nobody_needs_are_not_kept(tmp_path):
    # "Garden" is found as written, so the row of "garden" (looked for just in case) is dropped
    path = write(tmp_path / "v.txt", "garden 1\nGarden 2\n")
    loaded = load_vectors_for(path, ["Garden"])
    assert loaded.words == ("Garden",) and loaded.coverage.exact == ("Garden",)


def test_duplicates_keep_the_first_row_and_warn_once_with_a_count(tmp_path):
    path = write(tmp_path / "v.txt", "palm 1\nfern 2\npalm 3\nfern 4\npalm 5\nother 6\nother 7\n")
    with pytest.warns(DuplicateWordsWarning) as caught:
        loaded = load_vectors_for(path, {"palm", "fern"})
    assert len(caught) == 1
    assert "3 repeated" in str(caught[0].message) and "'palm' at line 3" in str(caught[0].message)
    assert loaded.duplicates == 3  # repeats of "other" were not looked up and are not counted
    np.testing.assert_array_equal(loaded.vectors, [[1], [2]])
    with pytest.warns(DuplicateWordsWarning):
        assert load_vectors_for(path, None).duplicates == 4


def test_duplicates_in_a_binary_file_are_located_by_byte(tmp_path):
    path = tmp_path / "v.bin"
    write_word2vec_binary(path, ["a", "b"], np.ones((2, 1)))
    data = path.read_bytes()
    write(path, data.replace(b"2 1\n", b"3 1\n") + b"a " + np.float32(9).tobytes() + b"\n")
    with pytest.warns(DuplicateWordsWarning, match=r"'a' at byte 18"):  # header 4 bytes + 2 rows of 7
        loaded = load_vectors_for(path, {"a"})
    assert loaded.duplicates == 1 and loaded.vectors[0, 0] == 1


def test_encoding_errors_replace_substitutes(tmp_path):
    path = write(tmp_path / "v.txt", b"caf\xe9 1 2\npalm 3 4\n")
    loaded = load_vectors_for(path, {"caf\ufffd", "palm"}, encoding_errors="replace")
    assert loaded.words == ("caf\ufffd", "palm")


def test_an_empty_wanted_set_still_reads_and_checks_the_file(tmp_path):
    loaded = load_vectors_for(write(tmp_path / "v.txt", "palm 1 2\nfern 3 4\n"), set())
    assert loaded.words == () and loaded.vectors.shape == (0, 2) and loaded.rows_scanned == 2


# --- top words -----------------------------------------------------------------------------------


@pytest.mark.parametrize("fmt", ["word2vec-text", "word2vec-binary"])
def test_read_top_words_stops_after_n_rows(tmp_path, fmt):
    path = tmp_path / "v.vec"
    vectors = sample_vectors()
    WRITERS[fmt](path, WORDS, vectors)
    top = read_top_words(path, 3)
    assert top.words == tuple(WORDS[:3]) and top.rows_scanned == 3
    np.testing.assert_array_equal(top.vectors, vectors[:3])
    assert top.bytes_scanned < path.stat().st_size
    everything = read_top_words(path, 100)
    assert everything.words == tuple(WORDS) and everything.rows_scanned == len(WORDS)
    assert read_top_words(path, 0).words == ()


def test_read_top_words_does_not_look_past_row_n(tmp_path):
    # the header's count is wrong, but only the first two rows are read
    path = write(tmp_path / "v.txt", "9 1\nthe 1\npalm 2\nfern x\n")
    assert read_top_words(path, 2).words == ("the", "palm")


def test_top_words_extend_a_vocabulary(tmp_path):
    path = write(tmp_path / "v.txt", "the 1\npalm 2\nfern 3\nbench 4\n")
    vocabulary = Vocabulary((UNKNOWN_WORD, "palm", "orchid")).extended(read_top_words(path, 3).words)
    assert vocabulary.words == (UNKNOWN_WORD, "palm", "orchid", "the", "fern")


# --- the matrix L ----------------------------------------------------------------------------------


def loaded_from(words: list[str], vectors: np.ndarray) -> LoadedVectors:
    from rntn_engine.data.word_vectors import VectorCoverage

    return LoadedVectors("mem.vec", "glove", False, vectors.shape[1], tuple(words), vectors.astype(np.float32),
                         VectorCoverage(), 0, len(words), 0, None)


def test_matrix_copies_found_rows_and_scales_random_rows_to_match():
    rng = np.random.default_rng(7)
    file_words = [f"w{i}" for i in range(4000)]
    spread = np.array([0.5, 2.0, 1.0, 1.0], dtype=np.float32)  # per-coordinate std of the "pretrained" vectors
    pretrained = (rng.standard_normal((4000, 4)) * spread + 3.0).astype(np.float32)
    vocabulary = Vocabulary((UNKNOWN_WORD, *file_words[:2000], *[f"new{i}" for i in range(3000)]))
    matrix, found = vectors_to_matrix(loaded_from(file_words, pretrained), vocabulary, np.random.default_rng(1), 4)
    assert matrix.shape == (5001, 4) and matrix.dtype == np.float64
    assert not found[0] and found[1:2001].all() and not found[2001:].any()
    np.testing.assert_array_equal(matrix[1:2001], pretrained[:2000])
    # s^2 = mean_j Var(found[:, j]) = (0.25 + 4 + 1 + 1) / 4 = 1.5625 -> s = 1.25; U(-a, a), a = sqrt(3) s
    random_rows = matrix[~found]
    s = math.sqrt(np.var(pretrained[:2000].astype(np.float64), axis=0).mean())
    assert abs(s - 1.25) < 0.05
    assert np.abs(random_rows).max() <= math.sqrt(3) * s
    assert abs(random_rows.std() - s) < 0.03 * s  # 12,004 uniform values: the std is within 3 %
    assert abs(random_rows.mean()) < 0.05  # centred on 0, not on the pretrained mean


def test_matrix_falls_back_to_the_default_width_and_draws_the_same_amount():
    vocabulary = Vocabulary((UNKNOWN_WORD, "palm", "fern"))
    none_found = loaded_from(["other"], np.ones((1, 3)))
    one_found = loaded_from(["palm"], np.full((1, 3), 5.0))
    two_found = loaded_from(["palm", "fern"], np.array([[1, 2, 3], [3, 2, 1]]))
    states = []
    for loaded in (none_found, one_found, two_found):
        rng = np.random.default_rng(3)
        matrix, found = vectors_to_matrix(loaded, vocabulary, rng, 3, dtype=np.float32)
        assert matrix.dtype == np.float32
        if found.sum() < 2:
            assert np.abs(matrix[~found]).max() <= FALLBACK_HALF_WIDTH
        states.append(rng.bit_generator.state["state"]["state"])
    assert states[0] == states[1] == states[2]  # coverage does not change what follows in the stream
    matrix, _ = vectors_to_matrix(one_found, vocabulary, np.random.default_rng(3), 3)
    np.testing.assert_array_equal(matrix[1], [5, 5, 5])


# --- the bench script ------------------------------------------------------------------------------


def test_bench_script_runs_tiny_and_agrees_with_gensim(capsys):
    spec = importlib.util.spec_from_file_location("bench_vectors", REPO / "scripts" / "bench_vectors.py")
    bench = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(bench)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)  # gensim's own imports
        report = bench.main(["--rows", "2000", "--dim", "8", "--vocab", "50", "--repeats", "1", "--json"])
    assert report["values_agree"] is True  # checked against gensim's loader inside the script
    assert report["rows"] == 2000 and report["file_bytes"] > 2000 * 8 * 2
    assert report["ours_mb_per_s"] > 0 and report["gensim_mb_per_s"] > 0
    assert '"speedup_vs_gensim"' in capsys.readouterr().out
