"""`rntn gradcheck`: exit 0 on the real kernels, exit 1 on a wrong gradient and on a NaN one.

The wrong and the NaN gradient are injected by wrapping the objective's ``loss_and_gradient``
(the analytic gradient the command checks); the finite differences still come from the
untouched forward pass, so only the injected group may fail. Tiny settings keep it fast.
"""

from __future__ import annotations

import re

import numpy as np
import pytest

from rntn_engine.cli.app import main
from rntn_engine.model.objective import TreeModelObjective

SMALL = ["--dim", "2", "--trees", "3", "--max-words", "4", "--num-classes", "3"]


def gradcheck(capsys, *args):
    code = main(["gradcheck", *SMALL, *args])
    out, err = capsys.readouterr()
    return code, out, err


def verdicts(out: str) -> dict[str, str]:
    """parameter name -> 'ok' / 'FAILED' from the printed table."""
    rows = re.findall(r"^(\w+)\s+\d+\s+(\S+)\s+(ok|FAILED)$", out, re.MULTILINE)
    return {name: verdict for name, _, verdict in rows}


@pytest.mark.parametrize("model, groups", [("rnn", ["L", "W", "b", "Ws", "bs"]),
                                           ("rntn", ["L", "W", "b", "V", "Ws", "bs"]),
                                           ("mvrnn", ["L", "W", "b", "LM", "WM", "Ws", "bs"])])
def test_real_kernels_pass_with_exit_0(capsys, model, groups):
    code, out, err = gradcheck(capsys, "--model", model)
    assert code == 0, out + err
    assert verdicts(out) == {name: "ok" for name in groups}
    assert "all gradients within 1.0e-06" in out and err == ""


def inject(monkeypatch, corrupt):
    real = TreeModelObjective.loss_and_gradient

    def wrong(self, params, grads, chunks, *args, **kwargs):
        loss = real(self, params, grads, chunks, *args, **kwargs)
        corrupt(grads)
        return loss

    monkeypatch.setattr(TreeModelObjective, "loss_and_gradient", wrong)


def test_a_wrong_gradient_fails_with_exit_1(capsys, monkeypatch):
    def off_by_a_little(grads):
        grads["b"][0] += 1e-3  # far above the 1e-6 threshold relative to |db| of these trees

    inject(monkeypatch, off_by_a_little)
    code, out, err = gradcheck(capsys, "--model", "rntn")
    assert code == 1
    table = verdicts(out)
    assert table.pop("b") == "FAILED" and set(table.values()) == {"ok"}
    assert "all gradients within" not in out
    assert err.startswith("gradient check failed:") and " b " in err


def test_a_nan_gradient_fails_with_exit_1(capsys, monkeypatch):
    # max() drops NaN (nan > x is False): the verdict must not rest on the largest error alone
    def nan(grads):
        grads["W"][0, 0] = np.nan

    inject(monkeypatch, nan)
    code, out, err = gradcheck(capsys, "--model", "rnn")
    assert code == 1
    table = verdicts(out)
    assert table.pop("W") == "FAILED" and set(table.values()) == {"ok"}
    assert re.search(r"^W\s+\d+\s+nan\s+FAILED$", out, re.MULTILINE)
    assert "all gradients within" not in out
    assert "W nan" in err
