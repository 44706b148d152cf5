"""Plain sentences are tokenised by treebank conventions (data/sentence_tokens.py).

External reference: nltk's TreebankWordTokenizer (with convert_parentheses=True), an
independent implementation of the same Penn-Treebank conventions; our tokens must equal
its tokens on hand-written sentences and on a few hundred generated ones.
"""

import numpy as np
import pytest
from nltk.tokenize import TreebankWordTokenizer

from rntn_engine.data.sentence_tokens import looks_untokenised, treebank_tokens

NLTK = TreebankWordTokenizer()

HANDWRITTEN = [
    "The fern grotto wasn't worth the queue.",
    'I can\'t believe it (really) -- "wow"!',
    "They're gonna love the café's scones, aren't they?",
    "Cost: $5.50 at 10:30... ok",
    "the orchids' scent",
    "a [b] {c} d",
    "e.g. the U.S. palms, Mr. Reed said.",
    "We cannot wait; the palm house opens at 9:00, or so they say.",
    '"Lovely," she said.',
    "1,000 visitors (or more) came.",
    "Wow!!! Great...",
    "I'd say we'll go, you've seen it, I'm sure.",
    "Gotta see it. Lemme know.",
    "WON'T go back & DIDN'T enjoy it #fail @ 50% off",
    "Staff were not unhelpful -- but the café wasn't open.",
]

PIECES = ["the", "glasshouse", "orchids", "café", "staff", "was", "were", "is", "not", "very", "quite", "lovely",
          "dull", "but", "and", "queue", "wasn't", "isn't", "didn't", "can't", "won't", "it's", "they're", "we'll",
          "I'd", "you've", "I'm", "gardeners'", "cannot", "gonna", "(sadly)", "[closed]", "\"great\"", "10:30",
          "1,200", "$4.50", "50%", "--", "...", "e.g.", "Mr.", "#moss", "@fern", "&", "really;", "odd:", "yes,",
          "why?", "wow!", "palm's"]


def generated_sentences(n=300, seed=7):
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(n):
        words = [PIECES[i] for i in rng.integers(0, len(PIECES), int(rng.integers(2, 14)))]
        out.append(" ".join(words) + str(rng.choice([".", "!", "?", "", "..."])))
    return out


@pytest.mark.parametrize("sentence", HANDWRITTEN)
def test_handwritten_sentences_match_nltk(sentence):
    assert treebank_tokens(sentence) == NLTK.tokenize(sentence, convert_parentheses=True)


def test_generated_sentences_match_nltk():
    for sentence in generated_sentences():
        assert treebank_tokens(sentence) == NLTK.tokenize(sentence, convert_parentheses=True), sentence


def test_tokens_of_a_tokenised_sentence_are_themselves():
    # already tokenised treebank text passes through unchanged (what predict sees from a parser)
    for tokens in (["was", "n't", "worth", "the", "queue", "."], ["-LRB-", "moss", "-RRB-", "``", "ok", "''"]):
        assert treebank_tokens(" ".join(tokens)) == tokens
        assert not looks_untokenised(tokens)


def test_untokenised_words_are_noticed():
    assert looks_untokenised(["the", "queue."])
    assert looks_untokenised(["it", "wasn't"])
    assert not looks_untokenised(["e.g.", "Mr.", "3.5", "10:30"])


def test_tokens_are_separated_by_the_treebank_separators_only():
    # the tree reader's rule: space, tab, CR, FF, VT (and a line break) separate; Unicode spaces and
    # separators belong to the word, as they do in a tree's leaves
    sentence = "the\u00a0fern\rgrotto\u2028path\x1cend wasn't\tgreen\x0b.\u0085"
    assert treebank_tokens(sentence) == ["the\u00a0fern", "grotto\u2028path\x1cend", "was", "n't", "green",
                                         ".\u0085"]
    assert treebank_tokens("a\nb.") == ["a", "b", "."]
