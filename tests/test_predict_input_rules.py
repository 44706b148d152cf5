"""`rntn predict` on hostile or odd input: limits, errors after good lines, NUL and bad UTF-8 from a
file and from standard input, outputs that would destroy an input, the one line and token rule it
shares with the tree reader, treebank tokenisation of plain sentences, and the warnings."""

import io
import json
import os
import subprocess
import sys
import threading
from pathlib import Path

import pytest
from nltk.tokenize import TreebankWordTokenizer

from demo_slices import write_demo_slices
from rntn_engine.cli.app import main
from rntn_engine.data.bracket_tokens import unescape_token
from rntn_engine.data.treebank_reader import iter_trees_exact, read_trees
from rntn_engine.run import prediction
from rntn_engine.run.prediction import BLOCK_LINES, MAX_INPUT_LINE_BYTES, TREE_LINES_FACTOR

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def model(tmp_path_factory):
    root = tmp_path_factory.mktemp("predict-rules")
    write_demo_slices(root, 80)
    run_dir = root / "run"
    assert main(["train", "--train-file", str(root / "train.trees"), "--dim", "4", "--epochs", "1",
                 "--batch-size", "20", "--run-dir", str(run_dir), "--no-progress"]) == 0
    return run_dir / "model.h5"


def _predict(model, *args):
    return main(["predict", str(model), *map(str, args)])


def _stdin(monkeypatch, data: bytes):
    monkeypatch.setattr("sys.stdin", io.TextIOWrapper(io.BytesIO(data), encoding="utf-8"))


def _run_with_stdin(model, data: bytes, *args) -> subprocess.CompletedProcess:
    """The command in its own process, reading ``data`` on its real standard input."""
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    return subprocess.run([sys.executable, "-m", "rntn_engine.cli.app", "predict", str(model), "-", *args],
                          input=data, capture_output=True, env=env, timeout=120)


# --- limits -----------------------------------------------------------------------------------------


def test_a_line_longer_than_the_limit_is_refused_after_the_lines_before_it(model, tmp_path, capsys):
    path, out = tmp_path / "in.txt", tmp_path / "out.trees"
    path.write_text("the roses were lovely\nthe queue was long\n" + "moss " * 40 + "\nnever read\n")
    assert _predict(model, path, "-o", out, "--max-line-bytes", "100") == 1
    err = capsys.readouterr().err
    assert f"{path}:3:1: line longer than 100 bytes (--max-line-bytes)" in err
    assert "Traceback" not in err and len(err.strip().splitlines()) == 1
    assert len(out.read_text().splitlines()) == 2  # the two lines before it were predicted and written


def test_the_default_line_limit_is_the_named_constant(model, tmp_path, capsys):
    words = "moss " * (MAX_INPUT_LINE_BYTES // 5 + 2)
    fits, too_long = words[: MAX_INPUT_LINE_BYTES - 1], words[: MAX_INPUT_LINE_BYTES - 1] + "xy"
    path = tmp_path / "in.txt"
    path.write_text(fits + "\n")
    assert _predict(model, path, "-o", tmp_path / "out") == 0
    path.write_text(fits + "\n" + too_long + "\n")
    assert _predict(model, path, "-o", tmp_path / "out") == 1
    assert f"{path}:2:1: line longer than {MAX_INPUT_LINE_BYTES} bytes" in capsys.readouterr().err


def test_a_tree_spread_over_too_many_bytes_of_lines_is_refused_at_its_first_line(model, tmp_path, capsys):
    path = tmp_path / "in.txt"
    path.write_text("a fine day\n(S\n" + "  (NP (DT the) (NN moss))\n" * (TREE_LINES_FACTOR * 100 // 20) + ")\n")
    assert _predict(model, path, "--max-line-bytes", "100", "-o", tmp_path / "out") == 1
    assert f"{path}:2:1: tree longer than {TREE_LINES_FACTOR * 100} bytes over its lines" in capsys.readouterr().err
    assert len((tmp_path / "out").read_text().splitlines()) == 1


# --- an error after good lines keeps their output -----------------------------------------------------


def test_a_bad_tree_after_more_than_a_block_of_lines_keeps_every_earlier_prediction(model, tmp_path, capsys):
    n = BLOCK_LINES + 44  # a full block and part of the next are waiting when the bad line comes
    path, out = tmp_path / "in.txt", tmp_path / "out.trees"
    path.write_text("the roses were lovely\n" * n + "(this is not a tree\n(2 (2 a) (2 b))\n")
    assert _predict(model, path, "-o", out) == 1
    err = capsys.readouterr().err
    assert f"{path}:{n + 1}:" in err and "Traceback" not in err
    assert len(out.read_text().splitlines()) == n


# --- NUL and invalid UTF-8, from a file and from standard input ------------------------------------------


@pytest.mark.parametrize("data, place, what", [
    (b"the roses were lovely\nthe roses\x00 were lovely\n", "2:10", "NUL byte"),
    (b"the roses were lovely\nwere \xff lovely\n", "2:6", "invalid UTF-8 byte 0xff"),
])
def test_nul_and_invalid_utf8_give_the_same_one_line_error_from_a_file_and_from_stdin(model, tmp_path, capsys,
                                                                                      data, place, what):
    path = tmp_path / "in.txt"
    path.write_bytes(data)
    assert _predict(model, path, "--format", "jsonl", "-o", tmp_path / "out") == 1
    file_error = capsys.readouterr().err.strip()
    assert file_error.startswith(f"{path}:{place}: ") and what in file_error and "\n" not in file_error
    assert len((tmp_path / "out").read_text().splitlines()) == 1  # the good first line
    done = _run_with_stdin(model, data, "--format", "jsonl")
    assert done.returncode == 1
    assert done.stderr.decode().strip() == file_error.replace(str(path), "<stdin>")
    assert len(done.stdout.splitlines()) == 1 and b"\xff" not in done.stdout and b"\xef\xbf\xbd" not in done.stdout


# --- outputs that are inputs ------------------------------------------------------------------------------


@pytest.mark.parametrize("case", ["input", "hard-link-to-input", "symlink-to-input", "checkpoint",
                                  "other-checkpoint", "stdin-redirected-from-it"])
def test_an_output_that_is_an_input_or_a_checkpoint_is_refused_and_left_intact(model, tmp_path, capsys,
                                                                              monkeypatch, case):
    source = tmp_path / "in.txt"
    source.write_text("the roses were lovely\n")
    checkpoint = tmp_path / "model.h5"
    checkpoint.write_bytes(model.read_bytes())
    input_arg = str(source)
    output = {"input": source, "checkpoint": checkpoint, "stdin-redirected-from-it": source}.get(case)
    if case == "hard-link-to-input":
        output = tmp_path / "link.txt"
        os.link(source, output)
    elif case == "symlink-to-input":
        output = tmp_path / "sym.txt"
        output.symlink_to(source)
    elif case == "other-checkpoint":
        output = tmp_path / "other.h5"
        output.write_bytes(model.read_bytes())
    elif case == "stdin-redirected-from-it":
        input_arg = "-"
        monkeypatch.setattr("sys.stdin", open(source, encoding="utf-8"))
    before = {p: p.read_bytes() for p in (source, checkpoint, Path(output))}
    assert main(["predict", str(checkpoint), input_arg, "-o", str(output)]) == 2
    err = capsys.readouterr().err
    assert "choose another output file" in err and len(err.strip().splitlines()) == 1
    assert {p: p.read_bytes() for p in before} == before


def test_an_output_that_cannot_be_opened_is_one_line(model, tmp_path, capsys):
    (tmp_path / "in.txt").write_text("the roses were lovely\n")
    assert _predict(model, tmp_path / "in.txt", "-o", tmp_path) == 1
    err = capsys.readouterr().err
    assert err.startswith(f"{tmp_path}: cannot write the predictions there") and "Traceback" not in err


def test_a_word_no_tree_can_hold_is_a_one_line_error(model, tmp_path, capsys):
    path = tmp_path / "in.txt"
    path.write_text("a fine day\n-LRB{ x\n")  # unescaped: '-LRB{', whose escaped form reads back as '(LCB-'
    assert _predict(model, path, "--no-tokenize", "-o", tmp_path / "out") == 1
    err = capsys.readouterr().err
    assert err.startswith(f"{path}:2: cannot write this item's tree") and len(err.strip().splitlines()) == 1


# --- one line and token rule with the tree reader ------------------------------------------------------------


@pytest.mark.parametrize("words", [["the", "roses", "were", "lovely"], ["the", "roses\u2028were", "lovely\u00a0day"],
                                   ["a\u2029b", "c\u0085d", "e\x1cf\x1dg", "h\x1ei\x1fj"]])
@pytest.mark.parametrize("separator", [" ", "\r", "\t", "\x0b", "\x0c"])
def test_predict_and_the_tree_reader_split_lines_and_words_by_one_rule(model, tmp_path, capsys, words, separator):
    """A lone CR and the ASCII separators separate words; Unicode line, paragraph and other separators
    belong to their word and never end a line: in a sentence, in a tree for predict, and in the reader."""
    leaves = " ".join(f"(2 {w})" for w in words)
    tree_line = f"(2{separator}{leaves.replace(' ', separator)})"
    sentence_line = separator.join(words)
    treebank = tmp_path / "bank.trees"
    treebank.write_bytes((tree_line + "\r\n" + tree_line + "\n").encode())  # CRLF and LF alike
    for read in (read_trees, iter_trees_exact):
        assert [list(t.words) for t in read(treebank)] == [words, words]
    path = tmp_path / "in.txt"
    path.write_bytes((sentence_line + "\r\n" + tree_line + "\n" + sentence_line).encode())
    for tokenize in ("--tokenize", "--no-tokenize"):
        assert _predict(model, path, "--format", "jsonl", tokenize) == 0
        records = [json.loads(r) for r in capsys.readouterr().out.splitlines()]
        assert [r["line"] for r in records] == [1, 2, 3]
        assert [r["nodes"][-1]["text"] for r in records] == [" ".join(words)] * 3
        assert [len(r["nodes"]) for r in records] == [2 * len(words) - 1] * 3


# --- tokenisation of plain sentences ---------------------------------------------------------------------------


NLTK = TreebankWordTokenizer()


def test_plain_sentences_are_tokenised_by_treebank_conventions(model, tmp_path, capsys):
    sentences = ["The café wasn't worth the queue.", "I can't say (really) it's \"great\", can you?"]
    path = tmp_path / "in.txt"
    path.write_text("\n".join(sentences) + "\n")
    assert _predict(model, path, "--format", "jsonl") == 0
    records = [json.loads(r) for r in capsys.readouterr().out.splitlines()]
    for sentence, record in zip(sentences, records):
        # external reference: nltk's Treebank-style word tokenizer (escapes undone, as a tree's words are)
        expected = [unescape_token(t) for t in NLTK.tokenize(sentence, convert_parentheses=True)]
        assert record["sentence"].split(" ") == expected
    assert _predict(model, path, "--format", "jsonl", "--no-tokenize") == 0
    records = [json.loads(r) for r in capsys.readouterr().out.splitlines()]
    assert records[0]["sentence"] == sentences[0]  # split at spaces only


# --- warnings ----------------------------------------------------------------------------------------------------


def _warnings(err: str, fragment: str) -> list[str]:
    return [line for line in err.splitlines() if line.startswith("warning:") and fragment in line]


def test_untokenised_input_is_warned_about_once_with_counts(model, tmp_path, capsys):
    path = tmp_path / "in.txt"
    path.write_text("(S (NP (DT the) (NN fern)) (VP (VBD was) (ADJP lovely.)))\n"
                    "(S (NP (DT the) (NN fern)) (VP (VBD was) (ADJP lovely)))\n"
                    "(S (NP (DT the) (NN cafe)) (VP (VBD wasn't) (ADJP open)))\n"
                    "the cafe wasn't open.\n")
    assert _predict(model, path) == 0
    lines = _warnings(capsys.readouterr().err, "untokenised")
    assert lines == [lines[0]] and lines[0].startswith("warning: 2 of 4 items look untokenised (line 1: 'lovely.')")
    assert _predict(model, path, "--no-tokenize") == 0  # now the plain sentence counts too
    assert _warnings(capsys.readouterr().err, "untokenised")[0].startswith("warning: 3 of 4 items")
    path.write_text("(S (NP (DT the) (NN fern)) (VP (VBD was) (ADJP lovely)))\nthe cafe wasn't open.\n")
    assert _predict(model, path) == 0
    assert _warnings(capsys.readouterr().err, "untokenised") == []


def test_a_high_share_of_unknown_words_is_warned_about_above_a_settable_limit(model, tmp_path, capsys):
    path = tmp_path / "in.txt"
    path.write_text("the zqx1 were zqx2\nthe zqx3 was lovely\n")  # 3 of 8 tokens unknown: 37.5%
    assert prediction.UNKNOWN_SHARE_WARNING < 0.375
    assert _predict(model, path) == 0
    lines = _warnings(capsys.readouterr().err, "unknown words")
    assert len(lines) == 1 and lines[0].startswith("warning: 37.5% of the tokens are unknown words (3 of 8)")
    for limit, warned in (("0.37", True), ("0.375", False), ("1", False)):
        assert _predict(model, path, "--warn-unknown-share", limit) == 0
        assert bool(_warnings(capsys.readouterr().err, "unknown words")) == warned
    assert _predict(model, path, "--warn-unknown-share", "1.5") == 2


# --- labels -----------------------------------------------------------------------------------------------------


def test_category_labels_are_unlabelled_for_prediction_and_refused_by_training_with_the_reason(model, tmp_path,
                                                                                               capsys):
    bank = tmp_path / "parsed.trees"
    bank.write_text("(S (NP (DT the) (NN fern)) (VP (VBD was) (ADJP lovely)))\n")
    assert _predict(model, bank, "--input-format", "trees") == 0
    assert capsys.readouterr().out.startswith("(")
    assert main(["train", "--train-file", str(bank), "--dim", "4", "--epochs", "1",
                 "--run-dir", str(tmp_path / "run"), "--no-progress"]) == 1
    err = capsys.readouterr().err
    assert f"{bank}:1:2: expected a label" in err and "found 'S'" in err
    assert "accepted only for prediction" in err and "training and scoring need class numbers" in err


@pytest.mark.parametrize("case", ["own-checkpoint", "hard-link-to-it", "another-checkpoint"])
def test_export_vectors_never_writes_over_a_checkpoint(model, tmp_path, capsys, case):
    checkpoint = tmp_path / "model.h5"
    checkpoint.write_bytes(model.read_bytes())
    out = {"own-checkpoint": checkpoint, "hard-link-to-it": tmp_path / "vectors.txt",
           "another-checkpoint": tmp_path / "other.h5"}[case]
    if case == "hard-link-to-it":
        os.link(checkpoint, out)
    elif case == "another-checkpoint":
        out.write_bytes(model.read_bytes())
    before = {p: p.read_bytes() for p in (checkpoint, out)}
    assert main(["export-vectors", str(checkpoint), str(out)]) == 1
    err = capsys.readouterr().err
    assert err.startswith(f"{out}: is ") and "choose another output file" in err
    assert {p: p.read_bytes() for p in before} == before


def test_a_reader_that_stops_early_ends_the_command_quietly(model):
    # `rntn predict ... | head -1`: once the pipe's reader has gone, the command stops with exit 0
    # and says nothing (what command-line filters do; common practice, no source)
    data = b"the rose garden was lovely .\n" * 20000  # far more output than a pipe buffer holds
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    proc = subprocess.Popen([sys.executable, "-m", "rntn_engine.cli.app", "predict", str(model), "-", "--no-progress"],
                            stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=env)

    def feed():
        try:
            proc.stdin.write(data)
            proc.stdin.close()
        except BrokenPipeError:  # the command stopped before reading all of it: expected here
            pass

    threading.Thread(target=feed, daemon=True).start()
    first = proc.stdout.readline()
    proc.stdout.close()  # the reader goes away
    err = proc.stderr.read()
    assert proc.wait(timeout=120) == 0, err
    assert first.startswith(b"(") and err == b""
