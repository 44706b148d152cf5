"""The Python API (rntn_engine/api.py): the README's examples run as written, and the API agrees
with the command line."""

import os
import re
import threading
import warnings
from pathlib import Path

import numpy as np
import pytest

import rntn_engine as rn
from demo_slices import write_demo_slices
from rntn_engine.cli.app import main

ROOT = Path(__file__).resolve().parents[1]


def readme_python_blocks() -> list[str]:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    section = text[text.index("## Use from Python"):]
    section = section[: section.index("\n## ", 4)]
    return re.findall(r"```python\n(.*?)```", section, flags=re.S)


def test_the_readmes_python_examples_run(tmp_path, monkeypatch):
    blocks = readme_python_blocks()
    assert len(blocks) == 3
    os.symlink(ROOT / "data_demo", tmp_path / "data_demo")
    (tmp_path / "checkpoints").mkdir()
    monkeypatch.chdir(tmp_path)
    namespace: dict = {}
    for block in blocks:
        exec(compile(block, "README.md", "exec"), namespace)  # noqa: S102  the README's own code, as documented
    assert (tmp_path / "checkpoints" / "api-thread" / "model.h5").exists()
    assert namespace["finished"].finished and namespace["roots"].shape == (1, 8)


@pytest.fixture(scope="module")
def trained(tmp_path_factory):
    root = tmp_path_factory.mktemp("api")
    write_demo_slices(root, 60, 20)
    run = rn.train(train_file=root / "train.trees", dev_file=root / "dev.trees", dim=4, epochs=2,
                   batch_size=10, run_dir=root / "run")
    assert run.finished and run.model_path() == root / "run" / "model.h5"
    return root


def test_predict_agrees_with_the_command_line(trained, tmp_path):
    items = [line for line in (trained / "dev.trees").read_text().splitlines()[:8]]
    items += ["the palm house wasn't open .", "Lovely glasshouse, dull café!"]
    (tmp_path / "in.txt").write_text("\n".join(items) + "\n")
    out = tmp_path / "out.trees"
    assert main(["predict", str(trained / "run" / "model.h5"), str(tmp_path / "in.txt"), "-o", str(out)]) == 0
    cli_trees = out.read_text().splitlines()
    with rn.load_model(trained / "run") as model:
        results = model.predict(items)
        assert [r.bracketed() for r in results] == cli_trees  # plain sentences tokenised the same way too
        sentence = model.predict(["the palm house wasn't open ."])[0]
        assert sentence.from_sentence and sentence.words == ("the", "palm", "house", "was", "n't", "open", ".")
        assert sentence.root_probabilities.shape == (5,) and abs(sentence.root_probabilities.sum() - 1) < 1e-5


def test_encode_gives_the_root_vectors_of_the_forward_pass(trained):
    with rn.load_model(trained / "run" / "model.h5") as model:
        items = ["(3 (2 the) (3 moss))", "the moss ."]
        roots = model.encode(items)
        every = model.encode(items, all_nodes=True)
        assert roots.shape == (2, 4) and [e.shape for e in every] == [(3, 4), (5, 4)]
        assert np.array_equal(roots, np.stack([e[-1] for e in every]))
        # one item alone gives the same vector, up to the last bits of a matrix product of another size
        np.testing.assert_allclose(model.encode(items[1:]), roots[1:], rtol=1e-5, atol=1e-7)


def test_a_closed_model_refuses_work(trained):
    model = rn.load_model(trained / "run")
    model.close()
    with pytest.raises(ValueError, match="is closed"):
        model.predict(["moss"])


def test_evaluate_gives_the_rows_of_the_command(trained):
    rows = rn.evaluate([trained / "run"], [trained / "dev.trees"])
    assert len(rows) >= 2 and sum(r.best for r in rows) == 1
    assert all(0 <= r.scores["fine_all"] <= 1 for r in rows)


def test_training_in_a_thread_stops_cleanly_and_leaves_nothing_behind(trained, tmp_path):
    import signal

    from threadpoolctl import threadpool_info

    handlers = {sig: signal.getsignal(sig) for sig in (signal.SIGTERM, signal.SIGINT, signal.SIGHUP)}
    blas_before = [i.get("num_threads") for i in threadpool_info()]
    stop = rn.StopRequest()
    lines: list[str] = []
    result = {}

    def echo(line: str) -> None:
        lines.append(line)
        if line.startswith("epoch"):
            stop.request("test")

    worker = threading.Thread(target=lambda: result.update(run=rn.train(
        train_file=trained / "train.trees", dim=4, epochs=30, batch_size=10, run_dir=tmp_path / "run",
        stop=stop, echo=echo)))
    worker.start()
    worker.join(timeout=300)
    assert result["run"].stopped and any("stopped by test" in line for line in lines)
    assert {sig: signal.getsignal(sig) for sig in handlers} == handlers
    assert [i.get("num_threads") for i in threadpool_info()] == blas_before
    done = rn.resume(tmp_path / "run", epochs=2)
    assert done.finished


def test_predict_on_sentences_follows_the_readers_rule_and_warns_once_per_call(trained):
    with rn.load_model(trained / "run") as model:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            results = model.predict(["the moss (really) wasn't green.", "the roses\rwere\u2028lovely",
                                     "(S (NP (DT the) (NN moss)) (VP green.))", "zqx1 zqx2 zqx3"])
        assert results[0].words == ("the", "moss", "(", "really", ")", "was", "n't", "green", ".")
        assert results[1].words == ("the", "roses", "were\u2028lovely")
        messages = [str(w.message) for w in caught]
        assert len(messages) == 2
        assert messages[0].startswith("1 of 4 items look untokenised (item 3: 'green.')")
        assert "of the tokens are unknown words" in messages[1] and "(warn_unknown_share)" in messages[1]
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            model.predict(["the moss was green ."], warn_unknown_share=1.0)  # no warning at all
        with pytest.warns(UserWarning, match=r"^1 of 1 items look untokenised \(item 1: \"wasn't\"\)"):
            kept = model.predict(["the moss wasn't green."], tokenize=False, warn_unknown_share=1.0)[0]
        assert kept.words == ("the", "moss", "wasn't", "green.")
