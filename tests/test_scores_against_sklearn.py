"""Our scores equal scikit-learn's (an independent, general-purpose metrics library) on the same labels."""

import numpy as np
import pytest
from sklearn.metrics import accuracy_score, confusion_matrix as sk_confusion, f1_score, precision_recall_fscore_support

from rntn_engine.run.scores import LabelScheme, accuracy, binary_accuracy, confusion_matrix, macro_f1, per_class_scores


@pytest.mark.parametrize("seed", range(5))
def test_accuracy_confusion_and_per_class_scores_match_scikit_learn(seed):
    rng = np.random.default_rng(seed)
    C = 5
    gold = rng.integers(-1, C, size=400)  # -1: unlabelled, left out
    predicted = np.where(rng.random(400) < 0.6, np.maximum(gold, 0), rng.integers(0, C, size=400))
    if seed == 4:
        predicted[predicted == 3] = 2  # a class never predicted: precision undefined -> 0 in both
    keep = gold >= 0
    # scikit-learn reference
    assert accuracy(gold, predicted) == pytest.approx(accuracy_score(gold[keep], predicted[keep]), abs=1e-15)
    ours = confusion_matrix(gold, predicted, C)
    assert np.array_equal(ours, sk_confusion(gold[keep], predicted[keep], labels=list(range(C))))
    p, r, f, s = precision_recall_fscore_support(gold[keep], predicted[keep], labels=list(range(C)),
                                                 zero_division=0)
    mine = per_class_scores(ours)
    np.testing.assert_allclose(mine["precision"], p, rtol=0, atol=1e-15)
    np.testing.assert_allclose(mine["recall"], r, rtol=0, atol=1e-15)
    np.testing.assert_allclose(mine["f1"], f, rtol=0, atol=1e-12)
    assert np.array_equal(mine["support"], s)


@pytest.mark.parametrize("case", ["plain", "class never predicted", "class absent from gold", "one class"])
def test_macro_f1_matches_scikit_learn(case):
    rng = np.random.default_rng(11)
    C = 5
    gold = rng.integers(-1, C, size=300)
    predicted = np.where(rng.random(300) < 0.5, np.maximum(gold, 0), rng.integers(0, C, size=300))
    if case == "class never predicted":
        predicted[predicted == 4] = 3
    if case == "class absent from gold":
        gold[gold == 0] = 1
    if case == "one class":
        gold[gold >= 0] = 2
        predicted[:] = 2
    keep = gold >= 0
    # scikit-learn reference: f1_score(average="macro") averages over the labels present in gold or predictions
    expected = f1_score(gold[keep], predicted[keep], average="macro", zero_division=0)
    assert macro_f1(confusion_matrix(gold, predicted, C)) == pytest.approx(expected, abs=1e-12)


def test_binary_accuracy_matches_scikit_learn_on_the_two_sided_view():
    rng = np.random.default_rng(3)
    C = 5
    gold = rng.integers(-1, C, size=300)
    probs = rng.dirichlet(np.ones(C), size=300)
    scheme = LabelScheme.for_classes(C)
    keep = (gold >= 0) & (gold != 2)
    gold_side = gold[keep] >= 3
    predicted_side = probs[keep][:, 3:].sum(1) > probs[keep][:, :2].sum(1)
    # scikit-learn reference on the side labels
    assert binary_accuracy(gold, probs, scheme) == pytest.approx(accuracy_score(gold_side, predicted_side))


@pytest.mark.parametrize("C,neg,neutral,pos", [(5, [0, 1], 2, [3, 4]), (3, [0], 1, [2]), (2, [0], None, [1]),
                                               (4, [0, 1], None, [2, 3])])
def test_default_label_schemes(C, neg, neutral, pos):
    scheme = LabelScheme.for_classes(C)
    assert scheme.neutral == neutral
    assert np.flatnonzero(scheme.negative_mask()).tolist() == neg
    assert np.flatnonzero(scheme.positive_mask()).tolist() == pos


def test_binary_accuracy_hand_example():
    # computed here by hand: nodes (gold, P): (0, neg wins) right, (4, pos wins) right, (2, -) left out,
    # (1, pos wins) wrong, (-1, -) left out  ->  2 / 3
    probs = np.array([[.5, .2, .1, .1, .1], [.1, .1, .1, .2, .5], [.2] * 5, [.1, .1, .2, .3, .3], [.2] * 5])
    gold = np.array([0, 4, 2, 1, -1])
    assert binary_accuracy(gold, probs, LabelScheme.for_classes(5)) == pytest.approx(2 / 3)


def test_binary_accuracy_ties_predict_the_negative_side():
    # Worked out here by hand (the rule of the module docstring: positive only when the positive
    # total is strictly larger). Probabilities are sums of powers of two, so every total is exact.
    # C = 5: negative {0, 1}, neutral 2, positive {3, 4}
    #   row 0: neg .25+.125 = .375, pos .125+.25 = .375  tie -> negative; gold 3 (positive): wrong
    #   row 1: the same tie                                -> negative; gold 1 (negative): right
    #   row 2: neg .125+.125 = .25, pos .125+.125 = .25   tie -> negative; gold 4 (positive): wrong
    #   row 3: neg .0625+.0625 = .125, pos .25+.125 = .375    -> positive; gold 4 (positive): right
    #   row 4: gold 2 (neutral): left out
    #   -> 2 right of 4 = 0.5   (a rule that sent ties to the positive side would give 3 / 4)
    tie = [.25, .125, .25, .125, .25]
    probs = np.array([tie, tie, [.125, .125, .5, .125, .125], [.0625, .0625, .5, .25, .125], tie])
    gold = np.array([3, 1, 4, 4, 2])
    assert binary_accuracy(gold, probs, LabelScheme.for_classes(5)) == 0.5
    # C = 2: negative {0}, positive {1}; [.5, .5] is a tie -> negative: gold 0 right, gold 1 wrong
    even = np.array([[.5, .5], [.5, .5]])
    assert binary_accuracy(np.array([0, 0]), even, LabelScheme.for_classes(2)) == 1.0
    assert binary_accuracy(np.array([1, 1]), even, LabelScheme.for_classes(2)) == 0.0
    # C = 4, no neutral: negative {0, 1}, positive {2, 3}; [.25] * 4 ties -> negative:
    # gold 0, 1 right, gold 3 wrong -> 2 / 3   (ties to positive would give 1 / 3)
    flat = np.full((3, 4), .25)
    assert binary_accuracy(np.array([0, 1, 3]), flat, LabelScheme.for_classes(4)) == pytest.approx(2 / 3, abs=1e-15)
