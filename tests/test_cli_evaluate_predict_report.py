"""`rntn evaluate`, `rntn predict` and `rntn report` end to end on a small demo run."""

import builtins
import csv
import io
import json
import shutil
from pathlib import Path

import numpy as np
import pytest

from demo_slices import write_demo_slices
from rntn_engine.cli.app import main
from rntn_engine.data.treebank_reader import read_trees
from rntn_engine.run.checkpoints import load_checkpoint
from rntn_engine.run.run_directory import list_checkpoints



@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    root = tmp_path_factory.mktemp("eval")
    write_demo_slices(root, 300, 80, dev_split="dev")
    run_dir = root / "run"
    assert main(["train", "--train-file", str(root / "train.trees"), "--dev-file", str(root / "dev.trees"),
                 "--dim", "8", "--epochs", "4", "--lr", "0.05", "--keep-checkpoints", "100",
                 "--run-dir", str(run_dir), "--no-progress"]) == 0
    return root, run_dir


def test_evaluate_all_checkpoints_agrees_with_the_run_record(demo_run, tmp_path, capsys):
    root, run_dir = demo_run
    capsys.readouterr()
    out = tmp_path / "scores"
    assert main(["evaluate", str(run_dir), "-t", str(root / "dev.trees"), "--jobs", "2", "--out", str(out),
                 "--no-progress"]) == 0
    text = capsys.readouterr().out
    assert "fine all" in text and "binary root" in text
    rows = json.loads((tmp_path / "scores.json").read_text())
    assert len(rows) == len(list_checkpoints(run_dir)) == 5  # step 0 and four epoch ends
    with open(tmp_path / "scores.csv", newline="") as fh:
        assert len(list(csv.DictReader(fh))) == 5
    best = [r for r in rows if r["best"]]
    assert len(best) == 1
    record = load_checkpoint(run_dir / "model.h5").state
    assert Path(best[0]["checkpoint"]).name == record["best_checkpoint"]
    assert best[0]["fine_root"] == pytest.approx(record["best_value"], abs=0)
    # the run's own per-epoch dev scores are reproduced exactly
    history = {m["step"]: m for m in load_checkpoint(run_dir / "model.h5").metrics}
    for r in rows:
        if r["step"] in history:
            assert r["fine_all"] == history[r["step"]]["dev_fine_all"]


def test_one_and_two_workers_give_the_same_table(demo_run, capsys):
    root, run_dir = demo_run
    tables = []
    for jobs in ("1", "2"):
        assert main(["evaluate", str(run_dir), "-t", str(root / "dev.trees"), "-j", jobs, "--json",
                     "--no-progress"]) == 0
        tables.append(json.loads(capsys.readouterr().out))
    assert tables[0] == tables[1]


def test_a_corrupt_checkpoint_is_reported_in_its_row_and_others_go_on(demo_run, tmp_path, capsys):
    root, run_dir = demo_run
    copies = tmp_path / "copies"
    copies.mkdir()
    for c in list_checkpoints(run_dir):
        shutil.copy(c.path, copies / c.path.name)
    broken = sorted(copies.iterdir())[2]
    data = bytearray(broken.read_bytes())
    broken.write_bytes(bytes(data[: len(data) // 3]))
    assert main(["evaluate", str(copies / "*.h5"), "-t", str(root / "dev.trees"), "--json", "--no-progress"]) == 0
    captured = capsys.readouterr()
    rows = json.loads(captured.out)
    bad = [r for r in rows if r["error"]]
    assert len(bad) == 1 and bad[0]["checkpoint"] == str(broken) and str(broken) in bad[0]["error"]
    assert sum(1 for r in rows if not r["error"]) == 4
    assert f"could not score {broken}" in captured.err


def test_detail_tables(demo_run, capsys):
    root, run_dir = demo_run
    capsys.readouterr()
    assert main(["evaluate", str(run_dir / "model.h5"), "-t", str(root / "dev.trees"), "--detail"]) == 0
    out = capsys.readouterr().out
    for needle in ("per class, all nodes", "precision", "confusion matrix, roots", "accuracy by phrase length",
                   "11-20", "negative [0, 1], neutral 2, positive [3, 4]"):
        assert needle in out
    assert main(["evaluate", str(run_dir / "model.h5"), "-t", str(root / "dev.trees"), "--detail", "--json"]) == 0
    report = json.loads(capsys.readouterr().out)
    confusion = np.array(report["all_nodes"]["confusion"])
    assert confusion.sum() == report["scores"]["labelled_nodes"]
    assert sum(b["nodes"] for b in report["by_phrase_length"]) == report["scores"]["labelled_nodes"]


def test_predict_trees_round_trip_through_the_reader(demo_run, tmp_path, capsys):
    root, run_dir = demo_run
    out = tmp_path / "pred.trees"
    assert main(["predict", str(run_dir / "model.h5"), str(root / "dev.trees"), "-o", str(out)]) == 0
    out2 = tmp_path / "pred2.trees"
    assert main(["predict", str(run_dir / "model.h5"), str(root / "dev.trees"), "-o", str(out2),
                 "--threads", "2"]) == 0
    assert out.read_bytes() == out2.read_bytes()  # the thread count never changes a label
    predicted = read_trees(out, num_classes=5)
    source = read_trees(root / "dev.trees")
    assert len(predicted) == len(source)
    for p, s in zip(predicted, source):
        assert p.words == s.words and np.array_equal(p.left, s.left) and np.all(p.label >= 0)
    # the labels equal the argmax the evaluation scores
    capsys.readouterr()
    assert main(["evaluate", str(run_dir / "model.h5"), "-t", str(root / "dev.trees"), "--json",
                 "--no-progress"]) == 0
    fine_all = json.loads(capsys.readouterr().out)[0]["fine_all"]
    gold = np.concatenate([s.label for s in source])
    mine = np.concatenate([p.label for p in predicted])
    assert np.mean(gold[gold >= 0] == mine[gold >= 0]) == pytest.approx(fine_all)


def test_predict_jsonl_from_stdin_with_sentences_and_parser_trees(demo_run, monkeypatch, capsys):
    _, run_dir = demo_run
    text = ("the guide was not worth the day\n\n"
            "(ROOT (S (NP (DT the) (NN walk)) (VP (VBD was) (ADJP (RB not) (JJ zzunseenzz)))))\n")
    monkeypatch.setattr("sys.stdin", io.StringIO(text))
    assert main(["predict", str(run_dir / "model.h5"), "-", "--format", "jsonl"]) == 0
    captured = capsys.readouterr()
    records = [json.loads(line) for line in captured.out.splitlines()]
    assert [r["line"] for r in records] == [1, 3]
    first, second = records
    assert first["tree_source"] == "fallback right-branching" and len(first["nodes"]) == 2 * 7 - 1
    assert first["nodes"][-1]["text"] == "the guide was not worth the day"
    assert second["tree_source"] == "input" and second["unknown_words"] == ["zzunseenzz"]
    for node in first["nodes"] + second["nodes"]:
        assert abs(sum(node["probabilities"]) - 1) < 1e-4 and node["label"] == int(np.argmax(node["probabilities"]))
    assert "unknown words: 1 of 12 tokens" in captured.err
    assert "1 plain sentences got a right-branching fallback tree" in captured.err


def test_predict_bad_tree_line_names_the_line(demo_run, tmp_path, capsys):
    _, run_dir = demo_run
    bad = tmp_path / "in.txt"
    bad.write_text("a fine walk\n(S (NP the) (VP was)\n", encoding="utf-8")
    assert main(["predict", str(run_dir / "model.h5"), str(bad)]) == 1
    assert f"{bad}:2:" in capsys.readouterr().err


def test_predict_reads_trees_spread_over_several_lines(demo_run, tmp_path, capsys):
    import nltk  # nltk's pretty printer writes the multi-line trees (external tool)

    root, run_dir = demo_run
    lines = (root / "dev.trees").read_text(encoding="utf-8").splitlines()[:30]
    single, multi = tmp_path / "single.trees", tmp_path / "multi.trees"
    single.write_text("\n".join(lines) + "\n", encoding="utf-8")
    pretty = [nltk.Tree.fromstring(line).pformat(margin=16) for line in lines]
    assert all("\n" in p for p in pretty)
    multi.write_text("\n".join(pretty) + "\n", encoding="utf-8")
    outputs = []
    for path in (single, multi):
        assert main(["predict", str(run_dir / "model.h5"), str(path), "--format", "jsonl"]) == 0
        outputs.append([json.loads(r) for r in capsys.readouterr().out.splitlines()])
    assert len(outputs[0]) == len(outputs[1]) == 30
    starts = [1 + sum(p.count("\n") + 1 for p in pretty[:k]) for k in range(30)]
    assert [r["line"] for r in outputs[1]] == starts  # each tree is named by its first line
    for a, b in zip(*outputs):
        assert a["nodes"] == b["nodes"]


def test_predict_names_the_line_of_a_tree_left_open(demo_run, tmp_path, capsys):
    _, run_dir = demo_run
    bad = tmp_path / "in.txt"
    bad.write_text("(S (NP (DT the) (NN walk))\n   (VP was)\n(S (NP a) (VP b))\n", encoding="utf-8")
    assert main(["predict", str(run_dir / "model.h5"), str(bad)]) == 1
    assert f"{bad}:2:12: expected ')' to close the node opened at line 1, column 1" in capsys.readouterr().err


def test_report_writes_png_figures(demo_run, tmp_path, capsys):
    _, run_dir = demo_run
    assert main(["report", str(run_dir), "--out-dir", str(tmp_path / "fig")]) == 0
    for name in ("learning_curves.png", "confusion_best.png"):
        assert (tmp_path / "fig" / name).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert not (tmp_path / "fig" / "slice_scores.png").exists()  # only with slices


def test_report_draws_the_scores_per_slice(demo_run, tmp_path, capsys):
    _, run_dir = demo_run
    assert main(["report", str(run_dir), "--out-dir", str(tmp_path / "fig"), "--slice", "neg=phrase-words:not",
                 "--slice", "short=phrase-length:2-5"]) == 0
    assert (tmp_path / "fig" / "slice_scores.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert main(["report", str(run_dir), "--out-dir", str(tmp_path / "fig"), "--slice", "r=root-class:mixed"]) == 2


def test_report_without_matplotlib_says_how_to_install(demo_run, tmp_path, monkeypatch, capsys):
    _, run_dir = demo_run
    real_import = builtins.__import__

    def no_matplotlib(name, *args, **kwargs):
        if name.startswith("matplotlib"):
            raise ImportError("No module named 'matplotlib'")
        return real_import(name, *args, **kwargs)

    monkeypatch.setattr(builtins, "__import__", no_matplotlib)
    assert main(["report", str(run_dir), "--out-dir", str(tmp_path / "fig")]) == 1
    assert "pip install 'rntn_engine[plot]'" in capsys.readouterr().err
