"""scripts/make_sweep_treebank.py writes a deterministic, well-formed treebank; scripts/sweep_defaults.py
runs end to end on a tiny setting and picks values by its stated rule (no score is asserted)."""

import importlib.util
from collections import Counter
from pathlib import Path

import pytest
from nltk import Tree

from demo_slices import write_demo_slices
from rntn_engine.data.treebank_reader import read_trees

SCRIPTS = Path(__file__).resolve().parents[1] / "scripts"


def load_script(name: str):
    spec = importlib.util.spec_from_file_location(name, SCRIPTS / f"{name}.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


@pytest.fixture(scope="module")
def generator():
    return load_script("make_sweep_treebank")


def generate(generator, directory: Path, seed: int, sizes=(300, 60, 60)) -> list[Path]:
    return generator.write_treebank(directory, seed, sizes, echo=lambda line: None)


def test_same_seed_same_bytes_other_seed_other_trees(generator, tmp_path):
    first = generate(generator, tmp_path / "a", 5)
    again = generate(generator, tmp_path / "b", 5)
    other = generate(generator, tmp_path / "c", 6)
    assert [p.read_bytes() for p in first] == [p.read_bytes() for p in again]
    assert first[0].read_bytes() != other[0].read_bytes()


def test_generated_treebank_is_binary_fully_labelled_and_readable(generator, tmp_path):
    paths = generate(generator, tmp_path, 3)
    sentences = []
    for path, size in zip(paths, (300, 60, 60)):
        # our reader, strict: binary trees only, every label a class 0..4
        trees = read_trees(path, num_classes=5, binarise="strict")
        assert len(trees) == size
        assert all((t.label >= 0).all() and (t.label <= 4).all() for t in trees)
        # external check: nltk's bracket reader sees the same sentences
        lines = path.read_text(encoding="utf-8").splitlines()
        assert [t.words for t in trees] == [tuple(Tree.fromstring(line).leaves()) for line in lines]
        sentences += [" ".join(t.words) for t in trees]
    assert len(set(sentences)) == len(sentences)  # no sentence repeats within or across splits
    train = read_trees(paths[0], num_classes=5)
    roots = Counter(int(t.label[-1]) for t in train)
    assert sorted(roots) == [0, 1, 2, 3, 4]  # every class occurs at the roots


def test_no_sentence_repeats_even_when_repeats_are_likely(generator, tmp_path, monkeypatch):
    # 30 words and two tokens per sentence: a few hundred possible sentences, so a draw repeats often
    monkeypatch.setattr(generator, "VOCABULARY_SIZE", 30)
    monkeypatch.setattr(generator, "sentence_length", lambda rng: 2)
    sentences = []
    for path in generate(generator, tmp_path, 1, sizes=(150, 30, 30)):
        sentences += [" ".join(Tree.fromstring(line).leaves()) for line in path.read_text().splitlines()]
    assert len(sentences) == 210 and len(set(sentences)) == 210


def test_negators_turn_the_sign_of_what_follows_without_noise(generator, tmp_path, monkeypatch):
    monkeypatch.setattr(generator, "NOISE_PERCENT", 0)
    (train, _, _) = generate(generator, tmp_path, 4, sizes=(400, 1, 1))
    checked = 0
    for line in train.read_text(encoding="utf-8").splitlines():
        for node in Tree.fromstring(line).subtrees():
            if len(node) == 2 and isinstance(node[0][0], str) and node[0][0] in generator.NEGATORS:
                inner, outer = int(node[1].label()), int(node.label())
                if inner >= 3:  # score >= 1/2, times a factor in [-3/4, -1/2]: at most -1/4
                    assert outer <= 2
                    checked += 1
                elif inner <= 1:
                    assert outer >= 2
                    checked += 1
    assert checked > 50


@pytest.fixture(scope="module")
def sweep():
    return load_script("sweep_defaults")


def candidate(roots: dict, seconds: dict) -> dict:
    return {"scores": {t: {"root": roots[t], "all": 0.9, "seconds": seconds[t]} for t in roots}}


def test_rule_takes_the_best_mean_rank(sweep):
    cands = [candidate({"a": 0.70, "b": 0.50}, {"a": 1, "b": 1}),  # rank 3 and 2
             candidate({"a": 0.75, "b": 0.60}, {"a": 1, "b": 1}),  # rank 2 and 1: mean 1.5, the best
             candidate({"a": 0.80, "b": 0.40}, {"a": 1, "b": 1})]  # rank 1 and 3: mean 2
    assert sweep.choose(cands, ["a", "b"], {"a": 0.0, "b": 0.0}, prefer_cheaper=False) == 1
    assert [c["mean_rank"] for c in cands] == [2.5, 1.5, 2.0]


def test_rule_prefers_a_cheaper_value_only_within_noise(sweep):
    cands = [candidate({"a": 0.70, "b": 0.60}, {"a": 10, "b": 20}),
             candidate({"a": 0.69, "b": 0.59}, {"a": 4, "b": 8})]
    noise = {"a": 0.02, "b": 0.02}
    assert sweep.choose(cands, ["a", "b"], noise, prefer_cheaper=True) == 1
    assert sweep.choose(cands, ["a", "b"], noise, prefer_cheaper=False) == 0
    assert sweep.choose(cands, ["a", "b"], {"a": 0.02, "b": 0.005}, prefer_cheaper=True) == 0  # outside on b


def test_ties_in_rank_and_root_go_to_the_higher_all_node_accuracy(sweep):
    cands = [candidate({"a": 0.70}, {"a": 1}), candidate({"a": 0.70}, {"a": 1})]
    cands[1]["scores"]["a"]["all"] = 0.95
    assert sweep.choose(cands, ["a"], {"a": 0.0}, prefer_cheaper=False) == 1


def test_noise_is_the_standard_error_of_a_difference_of_seed_means(sweep):
    # two candidates, two seeds: variances 0.0002 and 0, pooled 0.0001; sqrt(2 * 0.0001 / 2) = 0.01
    cands = [{"scores": {"a": {"roots": [0.80, 0.82]}}}, {"scores": {"a": {"roots": [0.70, 0.70]}}}]
    assert abs(sweep.stage_noise(cands, "a") - 0.01) < 1e-12


def test_recheck_takes_the_current_value_and_its_grid_neighbours(sweep):
    point = {**sweep.BASE, "dim": sweep.DIMS[0], "lr": sweep.LRS[2]}
    assert [s["dim"] for _, s in sweep.stage_values("dim", point, neighbours_only=True)] == list(sweep.DIMS[:2])
    assert [s["lr"] for _, s in sweep.stage_values("lr", point, neighbours_only=True)] == list(sweep.LRS[1:4])


def test_sweep_runs_tiny_end_to_end(sweep, tmp_path, capsys):
    train, dev = write_demo_slices(tmp_path, 40, 20)
    result = sweep.main(["--epochs", "1", "--seeds", "0", "1", "--final-seeds", "0", "1", "2", "--demo-files", str(train), str(dev), str(dev),
                         "--generated-sizes", "40", "20", "20", "--work-dir", str(tmp_path / "work"),
                         "--grid", "dim=3,4", "--grid", "batch_size=8,16", "--grid", "lr=0.02,0.05",
                         "--grid", "l2_scale=1,10", "--grid", "l2_group=1,3", "--grid", "mv=0,0.001",
                         "--out", str(tmp_path / "report.md"), "--json"])
    capsys.readouterr()
    assert [s["knob"] for s in result["stages"]] == ["dim", "batch_size", "lr", "l2_scale", "l2_words",
                                                     "l2_compose", "l2_tensor", "l2_classifier", "dim",
                                                     "batch_size", "lr", "finalists"]
    chosen = result["chosen"]
    assert chosen["dim"] in (3, 4) and chosen["batch_size"] in (8, 16) and chosen["lr"] in (0.02, 0.05)
    assert result["mvrnn"]["l2_word_matrices"] in (0.0, 0.001)
    for scores in (result["chosen_dev"], result["chosen_test"], result["reference"]["test"]):
        assert set(scores) == {"demo", "generated"}
        assert all(0 <= s["root"] <= 1 and 0 <= s["all"] <= 1 for s in scores.values())
    report = (tmp_path / "report.md").read_text()
    assert "| d | demo dev root |" in report and "previous defaults" in report
    # a second call trains nothing: every run comes from the results cache
    again = sweep.main(["--epochs", "1", "--seeds", "0", "1", "--final-seeds", "0", "1", "2", "--demo-files", str(train), str(dev), str(dev),
                        "--generated-sizes", "40", "20", "20", "--work-dir", str(tmp_path / "work"),
                        "--grid", "dim=3,4", "--grid", "batch_size=8,16", "--grid", "lr=0.02,0.05",
                        "--grid", "l2_scale=1,10", "--grid", "l2_group=1,3", "--grid", "mv=0,0.001", "--json"])
    assert again["trained_now"] == 0 and again["chosen"] == chosen
    finalists = [c["setting"] for c in result["stages"][-1]["candidates"]]
    assert chosen in finalists and len(finalists) >= 2
    assert all(len(c["scores"]["demo"]["roots"]) == 3 for c in result["stages"][-1]["candidates"])
