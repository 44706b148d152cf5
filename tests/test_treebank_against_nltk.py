"""Our reader and writer against an independent implementation: nltk.Tree.fromstring and
nltk.Tree.pformat (external check).

nltk parses the same bracket text; we then apply nltk's OWN tree transforms to
reach the shape our reader promises: ``collapse_unary(collapsePOS=True,
collapseRoot=True)`` joins a unary chain's labels with '+' (the outermost
labelled one must be ours), and ``chomsky_normal_form(factor=...)`` factors
n-ary nodes, naming new nodes ``parent|<...>`` (ours are unlabelled). Words are
compared after the Penn-Treebank bracket escapes, written out here from the
published convention rather than imported from our code.
"""

from __future__ import annotations

import random
import re

import nltk  # independent bracketed-tree reader (external check)
import numpy as np
import pytest

from rntn_engine.data.tree import UNLABELLED
from rntn_engine.data.treebank_reader import parse_tree

PTB_ESCAPES = {"-LRB-": "(", "-RRB-": ")", "-LCB-": "{", "-RCB-": "}", "-LSB-": "[", "-RSB-": "]"}
PTB_ESCAPE_RE = re.compile("|".join(map(re.escape, PTB_ESCAPES)))

HANDWRITTEN = [
    "(4 lovely)",
    "(_ lovely)",
    "(3 (2 The) (4 (3 roses) (2 bloomed)))",
    "(3(2 The)(4(3 roses)(2 bloomed)))",
    "(1 (_ (2 too) (1 crowded)) (_ (2 on) (2 Sundays)))",
    "(0 (0 (0 (0 (1 rain) (1 all)) (2 day)) (1 again)) (2 .))",
    "(2 (2 I) (2 (2 visited) (2 (2 the) (2 (2 fern) (2 house)))))",
    # escaped brackets
    "(2 (2 -LRB-) (2 (2 closed) (2 -RRB-)))",
    "(3 (3 :-RRB-) (2 -LSB-map-RSB-))",
    "(2 (2 -LCB-note-RCB-) (2 a-LRB-b-RRB-c))",
    # n-ary nodes
    "(3 (2 a) (2 b) (4 c))",
    "(3 (2 a) (2 b) (4 c) (1 d))",
    "(_ (1 a) (2 (0 b) (0 c) (0 d)) (3 e))",
    "(4 (3 (2 the) (2 glass) (2 house)) (4 (2 was) (4 stunning)))",
    "(2 (1 a) (1 b) (1 c) (1 d) (1 e) (1 f) (1 g))",
    # unary chains, over leaves and over inner nodes
    "(3 (2 word))",
    "(_ (2 word))",
    "(_ (_ (1 (2 word))))",
    "(_ (_ word))",
    "(2 (_ (1 a) (3 b)))",
    "(4 (1 (_ a)) (_ (3 (2 b) (0 c))))",
    "(3 (_ (1 a) (2 b) (0 c)))",
    "(1 (1 (1 (1 (1 a) (2 b)))))",
    "(2 (3 (1 (0 x))) (_ (_ (4 y) (4 z))))",
    # unlabelled nodes
    "(_ (_ a) (_ b))",
    "(_ (2 (_ a) (3 b)) (_ c))",
    # unicode words
    "(3 (2 café) (4 (3 naïve) (2 庭園)))",
    "(4 (4 🌹) (3 (2 très) (4 belle)))",
    "(2 (2 Ωμέγα) (2 (2 ß) (2 ǅ)))",
    # odd but valid words and spacing
    "(2 (2 #hashtag) (2 _))",
    "(1 (0 don't) (2 (2 co-op) (2 e.g.)))",
    "\t(2\t(1 a)  (3 b) )  ",
    "(12 (11 big) (10 labels))",
]


def _random_nary_tree(rng: random.Random) -> str:
    """Bracket text of a random tree mixing binary, n-ary and unary nodes, labels and placeholders."""
    pool = ["moss", "fern", "-LRB-", "-RRB-", "x-RSB-", "été", "庭", "quiet", "-LCB-a-RCB-", "!"]
    items = []
    for _ in range(rng.randint(1, 9)):
        items.append(f"({rng.choice(['0', '1', '2', '3', '4', '_'])} {rng.choice(pool)})")
    while len(items) > 1 or rng.random() < 0.2:  # sometimes wrap the root in a unary chain too
        k = min(len(items), rng.choice([1, 2, 2, 2, 3, 4]))
        j = rng.randrange(len(items) - k + 1)
        label = rng.choice(["0", "1", "2", "3", "4", "_"])
        items[j : j + k] = [f"({label} {' '.join(items[j : j + k])})"]
    return items[0]


RANDOM = [_random_nary_tree(random.Random(seed)) for seed in range(150)]


def _nltk_label(text: str) -> int:
    """Our label for an nltk node label after its transforms."""
    if "|<" in text:  # a node made by chomsky_normal_form: ours are unlabelled
        return UNLABELLED
    labelled = [part for part in text.split("+") if part != "_"]  # collapse_unary joins a chain with '+'
    return int(labelled[0]) if labelled else UNLABELLED  # the outermost labelled node wins


def _nltk_flat(text: str, factor: str):
    """words, word, left, right, label, spans from nltk, in post-order, for comparison."""
    tree = nltk.Tree.fromstring(text)
    tree.collapse_unary(collapsePOS=True, collapseRoot=True)
    tree.chomsky_normal_form(factor=factor)
    positions = [p for p in tree.treepositions("postorder") if isinstance(tree[p], nltk.Tree)]
    index = {p: i for i, p in enumerate(positions)}
    words, word, left, right, label, spans = [], [], [], [], [], []
    for p in positions:
        node = tree[p]
        label.append(_nltk_label(node.label()))
        if len(node) == 1 and isinstance(node[0], str):
            word.append(len(words)), left.append(-1), right.append(-1)
            spans.append((len(words), len(words) + 1))
            words.append(PTB_ESCAPE_RE.sub(lambda m: PTB_ESCAPES[m.group(0)], node[0]))
        else:
            assert len(node) == 2, "nltk's transforms leave binary nodes"
            l, r = index[p + (0,)], index[p + (1,)]
            word.append(-1), left.append(l), right.append(r)
            spans.append((spans[l][0], spans[r][1]))
    return tuple(words), word, left, right, label, spans


@pytest.mark.parametrize("factor", ["right", "left"])
@pytest.mark.parametrize("text", HANDWRITTEN + RANDOM)
def test_structure_words_spans_and_labels_match_nltk(text, factor):
    ours = parse_tree(text, binarise=factor)
    words, word, left, right, label, spans = _nltk_flat(text, factor)
    assert ours.words == words
    np.testing.assert_array_equal(ours.word, word)
    np.testing.assert_array_equal(ours.left, left)
    np.testing.assert_array_equal(ours.right, right)
    np.testing.assert_array_equal(ours.label, label)
    np.testing.assert_array_equal(ours.spans(), np.array(spans).reshape(-1, 2))


def test_the_sample_covers_the_cases_it_claims():
    sample = HANDWRITTEN + RANDOM
    assert len(HANDWRITTEN) >= 30
    assert any(re.search(r"\(\S+ (\([^()]*\) ){2,}\([^()]*\)\)", t) for t in sample)  # a node with 3+ leaf children
    assert any(re.search(r"\(\S+ \(\S+ [^()\s]+\)\)", t) for t in sample)  # a unary chain over a leaf
    assert any("-RRB-" in t for t in RANDOM) and any("(_ " in t for t in RANDOM)


# --- our writer against nltk's rendering -----------------------------------------------------------------
# nltk.Tree.pformat (external reference) prints a tree on one line when the margin allows it, as
# "(label child child)" with single spaces and leaves as they were read: for binary trees with no
# unary chains that is exactly our canonical format (module docstring of data/treebank_writer.py).

ONE_LINE = 10**9  # a margin no tree reaches, so nltk never breaks the line
PTB_ESCAPE_OF = {char: escape for escape, char in PTB_ESCAPES.items()}  # the published convention, not our table


def _ours_unchanged(text: str) -> bool:
    """True when the reader keeps nltk's structure: every node binary or a preterminal over one word."""
    tree = nltk.Tree.fromstring(text)
    nodes = [tree[p] for p in tree.treepositions() if isinstance(tree[p], nltk.Tree)]
    return all(len(n) == 2 and all(isinstance(c, nltk.Tree) for c in n)
               or len(n) == 1 and isinstance(n[0], str) for n in nodes)


BINARY_SAMPLE = [t for t in HANDWRITTEN + RANDOM if _ours_unchanged(t)]


@pytest.mark.parametrize("text", BINARY_SAMPLE)
def test_written_tree_equals_nltks_rendering_of_the_same_input(text):
    from rntn_engine.data.treebank_writer import format_tree

    assert format_tree(parse_tree(text)) == nltk.Tree.fromstring(text).pformat(margin=ONE_LINE)


def _nltk_tree_of(tree, labels) -> nltk.Tree:
    """An nltk.Tree with our tree's structure, labels and (escaped) words, built node by node."""
    built = {}
    for i in range(tree.n_nodes):  # post-order: children come before their parent
        label = "_" if labels[i] == UNLABELLED else str(labels[i])
        if tree.left[i] < 0:
            word = "".join(PTB_ESCAPE_OF.get(ch, ch) for ch in tree.words[tree.word[i]])
            built[i] = nltk.Tree(label, [word])
        else:
            built[i] = nltk.Tree(label, [built[tree.left[i]], built[tree.right[i]]])
    return built[tree.root]


@pytest.mark.parametrize("seed", range(40))
def test_written_random_tree_equals_nltks_rendering(seed):
    from rntn_engine.data.synthetic_trees import random_binary_tree
    from rntn_engine.data.treebank_writer import format_tree

    rng = np.random.default_rng(seed)
    words = ["moss", "(", ")", "a(b)c", "{x}", "[y]", "café", "庭園", "🌹", "don't", "_", "#", "e.g."]
    tree = random_binary_tree(rng, int(rng.integers(1, 12)), 5, words, p_unlabelled=0.3)
    assert format_tree(tree) == _nltk_tree_of(tree, tree.label).pformat(margin=ONE_LINE)
    predicted = rng.integers(-1, 12, size=tree.n_nodes)  # labels passed in, -1 written '_', two digits too
    assert format_tree(tree, predicted) == _nltk_tree_of(tree, predicted).pformat(margin=ONE_LINE)


def test_the_writer_sample_is_not_empty():
    assert len(BINARY_SAMPLE) >= 15 and any("-LRB-" in t for t in BINARY_SAMPLE)
