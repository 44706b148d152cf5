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

The test suite checks these rules against nltk's Treebank-style word tokenizer, an
independent implementation of the same conventions.
"""

from __future__ import annotations

import re

BRACKET_ESCAPES = {"(": "-LRB-", ")": "-RRB-", "[": "-LSB-", "]": "-RSB-", "{": "-LCB-", "}": "-RCB-"}

_OPENING_QUOTE = re.compile(r'(^|(?<=[\s(\[{<]))"')
_CLOSING_QUOTE = re.compile(r'"')
_BRACKET = re.compile(r"([()\[\]{}])")
_ALWAYS_ALONE = re.compile(r"([?!;@#$%&]|\.\.\.|--)")
_COMMA_OR_COLON = re.compile(r"([,:])(?!\d)|(?<!\d)([,:])")
_FINAL_PERIOD = re.compile(r"(?<!\.)\.((?:\s*(?:''|-RRB-|-RSB-|-RCB-|>|'))*)\s*$")
_CLITIC = re.compile(r"(?i)(?<=\S)(n't|'s|'m|'d|'ll|'re|'ve)(?=\s|$)")
_POSSESSIVE = re.compile(r"(?<=[^\s'])'(?=\s|$)")
_FUSED = re.compile(r"(?i)\b(can)(not)\b|\b(gon|got|wan)(na|ta)\b|\b(gim|lem)(me)\b")


def _split_fused(match: re.Match) -> str:
    parts = [g for g in match.groups() if g is not None]
    return f"{parts[0]} {parts[1]}"


def treebank_tokens(sentence: str) -> list[str]:
    """The tokens of one plain sentence, by the rules of the module docstring."""
    text = " " + sentence.strip() + " "
    text = _OPENING_QUOTE.sub(" `` ", text)
    text = _CLOSING_QUOTE.sub(" '' ", text)
    text = _BRACKET.sub(lambda m: f" {BRACKET_ESCAPES[m.group(1)]} ", text)
    text = _ALWAYS_ALONE.sub(r" \1 ", text)
    text = _COMMA_OR_COLON.sub(lambda m: f" {m.group(1) or m.group(2)} ", text)
    text = _FINAL_PERIOD.sub(r" . \1", text.rstrip())
    text = _CLITIC.sub(r" \1", text)
    text = _POSSESSIVE.sub(" '", text)
    text = _FUSED.sub(_split_fused, text)
    return text.split()


def looks_untokenised(words: list[str]) -> bool:
    """True when the words of a sentence still carry what tokenisation would split off (``queue.`` at the
    end, ``wasn't``, ``(moss``): the input was not tokenised the way a treebank is."""
    return treebank_tokens(" ".join(words)) != list(words)
