"""`rntn report` figures: learning curves with the best checkpoint, confusion matrices with class names,
a per-slice chart; and the class-name setting's checks. (The figures were also looked at by eye.)"""

import pytest

from demo_slices import write_demo_slices
from rntn_engine.cli.app import main
from rntn_engine.run.run_config import ConfigError, TrainConfig

pytest.importorskip("matplotlib")


def test_report_writes_both_figures_with_the_runs_class_names(tmp_path, monkeypatch):
    import rntn_engine.run.report_figures as figures

    write_demo_slices(tmp_path, 40, 20)
    run_dir = tmp_path / "run"
    names = "very negative,negative,neutral,positive,very positive"
    assert main(["train", "--train-file", str(tmp_path / "train.trees"), "--dev-file", str(tmp_path / "dev.trees"),
                 "--dim", "3", "--epochs", "3", "--run-dir", str(run_dir), "--no-progress",
                 "--class-names", names]) == 0
    seen = {}
    original_curves, original_confusions = figures.plot_learning_curves, figures.plot_confusions
    monkeypatch.setattr(figures, "plot_learning_curves",
                        lambda *a, **k: seen.setdefault("curves", (a, k)) and original_curves(*a, **k))
    monkeypatch.setattr(figures, "plot_confusions",
                        lambda *a, **k: seen.setdefault("confusions", (a, k)) and original_confusions(*a, **k))
    assert main(["report", str(run_dir)]) == 0
    for name in ("learning_curves.png", "confusion_best.png"):
        assert (run_dir / "report" / name).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    args, _ = seen["curves"]
    assert args[3] is not None and args[4] == "dev_fine_root"  # the best checkpoint is marked
    args, _ = seen["confusions"]
    assert [k.split(":")[0] for k in args[0]] == ["roots", "all nodes"] and args[1] == names.split(",")


def test_slice_chart_is_written(tmp_path):
    from rntn_engine.run.report_figures import plot_slice_scores

    rows = [{"slice": "all", "nodes": 900, "fine_all": 0.8, "fine_root": 0.5, "binary_all": 0.9},
            {"slice": "negation", "nodes": 40, "fine_all": 0.6, "fine_root": float("nan"), "binary_all": 0.7}]
    out = plot_slice_scores(rows, tmp_path / "slices.png", "slices")
    assert out.read_bytes()[:4] == b"\x89PNG"


@pytest.mark.parametrize("names, problem", [("a,b,c", "3 names for 5 classes"), ("a,b,b,c,d", "repeated or empty"),
                                            ("a,b,,c,d", "repeated or empty")])
def test_class_names_must_name_every_class_once(names, problem):
    with pytest.raises(ConfigError, match=problem):
        TrainConfig(train_file="x", class_names=names).validate()
    assert TrainConfig(train_file="x", class_names=" awful, poor ,so so,good,superb").names_of_classes()[1] == "poor"
