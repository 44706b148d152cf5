"""`rntn stats`: tables, JSON, several files, and exit codes 1 (bad input) and 2 (bad usage)."""

from __future__ import annotations

import json
import re
import subprocess
import sys

import pytest

from rntn_engine.cli.app import main

GARDEN = (
    "# visitor feedback\n"
    "(3 (2 The) (4 (3 roses) (2 bloomed)))\n"
    "(1 (2 too) (1 crowded))\n"
    "\n"
    "(_ (4 lovely))\n"
)
RAIN = "(0 (1 rain) (0 (1 all) (0 day)))\n"


def run(capsys, *args) -> tuple[int, str, str]:
    code = main(["stats", *map(str, args)])
    out, err = capsys.readouterr()
    return code, out, err


def summary_value(out: str, name: str) -> str:
    match = re.search(rf"^  {name}\s+(\S.*)$", out, re.MULTILINE)
    assert match, f"no line for {name!r} in:\n{out}"
    return match.group(1)


def test_tables_for_one_file(treebank_file, capsys):
    path = treebank_file(GARDEN)
    code, out, err = run(capsys, path)
    assert (code, err) == (0, "")  # no progress bar when stderr is not a terminal
    assert out.startswith(f"== treebank {path} ==")
    assert summary_value(out, "trees") == "3"
    assert summary_value(out, "nodes") == "9"
    assert summary_value(out, "words") == "6"
    assert summary_value(out, "distinct words") == "6"
    assert summary_value(out, "sentence length") == "min 1, median 2, mean 2, max 3"
    # label table: label, roots, share, all nodes, share
    assert re.search(r"^  4\s+1\s+33\.3%\s+2\s+22\.2%$", out, re.MULTILINE)
    # phrase-length table: one column per label seen, then unlabelled
    assert re.search(r"^  phrase length\s+nodes\s+1\s+2\s+3\s+4\s+unlabelled$", out, re.MULTILINE)
    assert re.search(r"^  2\s+2\s+50\.0%\s+0\.0%\s+0\.0%\s+50\.0%\s+0\.0%$", out, re.MULTILINE)
    assert "total of" not in out


def test_several_files_get_a_total(treebank_file, capsys):
    garden, rain = treebank_file(GARDEN, "garden.txt"), treebank_file(RAIN, "rain.txt")
    code, out, _ = run(capsys, garden, rain)
    assert code == 0
    sections = out.split("\n\n== ")
    assert [s.splitlines()[0].strip("= ") for s in sections] == [
        f"treebank {garden}",
        f"treebank {rain}",
        "total of 2 files",
    ]
    assert summary_value(sections[2], "trees") == "4"
    assert summary_value(sections[2], "nodes") == "14"
    assert summary_value(sections[2], "sentence length") == "min 1, median 2.50, mean 2.25, max 3"


def test_json_output(treebank_file, capsys):
    garden, rain = treebank_file(GARDEN, "garden.txt"), treebank_file(RAIN, "rain.txt")
    code, out, _ = run(capsys, "--json", "--num-classes", "5", garden, rain)
    assert code == 0
    report = json.loads(out)
    assert [f["path"] for f in report["files"]] == [str(garden), str(rain)]
    assert [f["n_trees"] for f in report["files"]] == [3, 1]
    assert report["total"]["n_nodes"] == 14
    assert report["total"]["root_labels"]["counts"] == {"0": 1, "1": 1, "2": 0, "3": 1, "4": 1, "unlabelled": 0}
    assert report["files"][1]["labels_by_phrase_length"]["3-5"]["counts"]["0"] == 1
    code, out, _ = run(capsys, "--json", rain)
    (single,) = json.loads(out)["files"]
    assert {"path": str(rain), **json.loads(out)["total"]} == single


def test_binarise_option_is_passed_to_the_reader(treebank_file, capsys):
    path = treebank_file("(2 (1 a) (2 b) (3 c))\n")
    code, out, _ = run(capsys, "--json", "--binarise", "left", path)
    assert code == 0 and json.loads(out)["total"]["node_labels"]["counts"]["unlabelled"] == 1
    code, _, err = run(capsys, "--binarise", "strict", path)
    assert code == 1
    assert err == f"{path}:1:16: node with more than two children in strict mode: expected ')' " \
                  "(binarise 'right' or 'left' accepts n-ary nodes)\n"


@pytest.mark.parametrize(
    "content, args, location",
    [
        ("(3 (2 a) (1 b)\n", [], ":1:15: expected ')'"),
        ("(1 a)\n(5 b)\n", ["--num-classes", "5"], ":2:2: label '5' out of range"),
        (b"", [], ":1:1: empty file"),
        (b"(2 caf\xe9)\n", [], ":1:7: invalid UTF-8"),
    ],
)
def test_bad_input_exits_1_with_one_line(treebank_file, capsys, content, args, location):
    path = treebank_file(content)
    code, out, err = run(capsys, *args, path)
    assert code == 1
    assert out == ""
    assert err.count("\n") == 1 and err.startswith(f"{path}{location}")
    assert "Traceback" not in err


def test_the_first_bad_file_of_several_stops_the_command(treebank_file, capsys):
    good, bad = treebank_file(GARDEN, "good.txt"), treebank_file("(1 a) b\n", "bad.txt")
    code, out, err = run(capsys, good, bad)
    assert code == 1 and out == ""
    assert err.startswith(f"{bad}:1:7: unexpected text after the end of the tree")


def test_a_missing_file_exits_1(tmp_path, capsys):
    code, _, err = run(capsys, tmp_path / "absent.txt")
    assert code == 1
    assert err == f"{tmp_path / 'absent.txt'}: cannot read the file: No such file or directory\n"


@pytest.mark.parametrize(
    "args",
    [
        [],  # no treebank
        ["--binarise", "up", "x.txt"],
        ["--num-classes", "0", "x.txt"],
        ["--num-classes", "five", "x.txt"],
        ["--no-such-option", "x.txt"],
    ],
)
def test_bad_usage_exits_2(capsys, args):
    code, _, err = run(capsys, *args)
    assert code == 2
    assert err.startswith("rntn: error: ") and err.count("\n") == 1
    assert "Traceback" not in err


def test_help_explains_the_options_and_the_format(capsys):
    code, out, _ = run(capsys, "--help")
    assert code == 0
    for text in ["--json", "--num-classes", "--binarise", "right", "left", "strict", "-LRB-", "_", "#", "exit"]:
        assert text.lower() in out.lower(), text


def test_progress_bar_appears_only_on_a_terminal(treebank_file, capsys, monkeypatch):
    path = treebank_file(GARDEN)
    monkeypatch.setattr(sys.stderr, "isatty", lambda: True)
    code, out, err = run(capsys, path)
    assert code == 0
    assert "lines" in err  # tqdm's counter, on stderr only
    assert "lines" not in out


def test_console_process_prints_no_traceback(treebank_file):
    # the package as this interpreter imports it (installed, or PYTHONPATH), like the other subprocess tests
    path = treebank_file("(3 (2 a) (1 b)))\n")
    done = subprocess.run(
        [sys.executable, "-m", "rntn_engine.cli.app", "stats", str(path)],
        capture_output=True, text=True, cwd=path.parent, timeout=120,
    )
    assert done.returncode == 1
    assert done.stdout == ""
    assert done.stderr == f"{path}:1:16: extra ')' after the end of the tree (a ')' inside a word is written -RRB-)\n"
