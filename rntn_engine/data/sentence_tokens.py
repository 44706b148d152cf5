"""Split a plain sentence into tokens the way treebanks write them.

A phrase-labelled treebank's leaves follow the Penn-Treebank tokenisation conventions, so
a plain sentence has to be cut the same way before its words can be found in the
vocabulary: "wasn't worth the queue." must become ``was n't worth the queue .``, not
``wasn't`` and ``queue.`` (two unknown words). The rules, applied to one sentence per call:

1. Double quotes become ``\\`\\``` when they open (at the start or after a space or an
   opening bracket) and ``''`` otherwise; both stand alone.
2. Brackets stand alone and are escaped: ( ) [ ] { } become -LRB- -RRB- -LSB- -RSB- -LCB-
   -RCB- (a literal bracket would end a tree).
3. Punctuation stands alone: ? ! ; @ # $ % & , and : (a comma or colon between digits, as
   in 1,000 or 10:30, stays inside the number), an ellipsis ``...``, and ``--``.
4. The sentence-final period stands alone (with any closing quotes or brackets after it);
   other periods stay with their word (``e.g.``, ``Mr.``, ``3.5``).
5. Clitics are split off the word they end: ``n't`` (``wasn't`` -> ``was n't``, ``can't``
   -> ``ca n't``, ``won't`` -> ``wo n't``), ``'s 'm 'd 'll 're 've`` and a bare possessive
   ``'`` (``orchids'`` -> ``orchids '``), in any letter case.
6. A few fused forms are split in two: cannot -> can not, gonna -> gon na, gotta -> got ta,
   wanna -> wan na, gimme -> gim me, lemme -> lem me.

Tokens are separated by the separators of the treebank format (space, tab, CR, FF, VT:
``bracket_tokens.SEPARATORS``) and by line breaks; every other character, a non-breaking
space or U+2028 included, belongs to a word, exactly as in a tree (data/treebank_reader.py,
"the line and token rule"), so a sentence and the tree of the same tokens give the same words.

The test suite checks these rules against nltk's Treebank-style word tokenizer, an
independent implementation of the same conventions.
"""

from __future__ import annotations

import re

from rntn_engine.data.bracket_tokens import SEPARATORS, unescape_token

BRACKET_ESCAPES = {"(": "-LRB-", ")": "-RRB-", "[": "-LSB-", "]": "-RSB-", "{": "-LCB-", "}": "-RCB-"}

_SPACE = SEPARATORS + "\n"  # what separates tokens: the treebank format's separators and the line break
_S = "[" + re.escape(_SPACE) + "]"  # one separator (the regex \s would also take Unicode spaces)
_NOT_S = "[^" + re.escape(_SPACE) + "]"

_OPENING_QUOTE = re.compile(r'(^|(?<=[' + re.escape(_SPACE) + r'(\[{<]))"')
_CLOSING_QUOTE = re.compile(r'"')
_BRACKET = re.compile(r"([()\[\]{}])")
_ALWAYS_ALONE = re.compile(r"([?!;@#$%&]|\.\.\.|--)")
_COMMA_OR_COLON = re.compile(r"([,:])(?!\d)|(?<!\d)([,:])")
_FINAL_PERIOD = re.compile(r"(?<!\.)\.((?:" + _S + r"*(?:''|-RRB-|-RSB-|-RCB-|>|'))*)" + _S + "*$")
_CLITIC = re.compile(r"(?i)(?<=" + _NOT_S + r")(n't|'s|'m|'d|'ll|'re|'ve)(?=" + _S + "|$)")
_POSSESSIVE = re.compile(r"(?<=[^" + re.escape(_SPACE) + r"'])'(?=" + _S + "|$)")
_SPLIT = re.compile(_S + "+")
_BRACKET_ESCAPE = str.maketrans(BRACKET_ESCAPES)
_FUSED = re.compile(r"(?i)\b(can)(not)\b|\b(gon|got|wan)(na|ta)\b|\b(gim|lem)(me)\b")


def _split_fused(match: re.Match) -> str:
    parts = [g for g in match.groups() if g is not None]
    return f"{parts[0]} {parts[1]}"


def treebank_tokens(sentence: str) -> list[str]:
    """The tokens of one plain sentence, by the rules of the module docstring."""
    text = " " + sentence.strip(_SPACE) + " "
    text = _OPENING_QUOTE.sub(" `` ", text)
    text = _CLOSING_QUOTE.sub(" '' ", text)
    text = _BRACKET.sub(lambda m: f" {BRACKET_ESCAPES[m.group(1)]} ", text)
    text = _ALWAYS_ALONE.sub(r" \1 ", text)
    text = _COMMA_OR_COLON.sub(lambda m: f" {m.group(1) or m.group(2)} ", text)
    text = _FINAL_PERIOD.sub(r" . \1", text.rstrip(_SPACE))
    text = _CLITIC.sub(r" \1", text)
    text = _POSSESSIVE.sub(" '", text)
    text = _FUSED.sub(_split_fused, text)
    return split_at_separators(text)


def split_at_separators(text: str) -> list[str]:
    """The pieces of ``text`` between separators (the treebank format's, and line breaks): no other rule."""
    return [t for t in _SPLIT.split(text) if t]


def sentence_words(sentence: str) -> list[str]:
    """The words of a plain sentence as a tree holds them: its tokens with the bracket escapes undone."""
    return [unescape_token(t) for t in treebank_tokens(sentence)]


def escape_brackets(word: str) -> str:
    """The word with every bracket written as its escape (``(`` -> ``-LRB-``), as treebank tokens hold it."""
    return word.translate(_BRACKET_ESCAPE)


def looks_untokenised(words: list[str] | tuple[str, ...]) -> bool:
    """True when the words of a sentence (or a tree's leaves) still carry what tokenisation would split off
    (``queue.`` at the end, ``wasn't``, ``moss,``): they were not tokenised the way a treebank is.
    Words may hold brackets (a tree's leaves) or their escapes (tokens): both are compared escaped."""
    tokens = [escape_brackets(w) for w in words]
    return treebank_tokens(" ".join(tokens)) != tokens
