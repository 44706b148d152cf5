"""Escapes for bracket characters inside words of a bracketed treebank.

Round brackets delimit nodes, so a word cannot hold them literally. The
Penn-Treebank convention writes every bracket character as a six-letter
escape, and we use the same table in both directions:

    -LRB-  (      -RRB-  )
    -LCB-  {      -RCB-  }
    -LSB-  [      -RSB-  ]

Reading replaces every escape inside a token (a whole token ``-LRB-`` as well
as ``:-RRB-`` inside a longer one), scanning left to right; writing replaces
every bracket character of a word. ``{ } [ ]`` may also appear literally in
input (they cannot be mistaken for structure); ``( )`` may not.

The six escapes are therefore reserved: a word that is meant to contain the
text ``-LRB-`` itself cannot be stored. :func:`escape_word` refuses the rare
word whose escaped form would read back as something else, and words that no
reader could take back (empty, holding white space or a NUL byte).
"""

from __future__ import annotations

import re

# escape -> character, the one table both directions use
ESCAPES: dict[str, str] = {
    "-LRB-": "(",
    "-RRB-": ")",
    "-LCB-": "{",
    "-RCB-": "}",
    "-LSB-": "[",
    "-RSB-": "]",
}

_ESCAPE_RE = re.compile("|".join(re.escape(e) for e in ESCAPES))
_ESCAPE_OF = str.maketrans({char: escape for escape, char in ESCAPES.items()})

# Characters that separate tokens on a line (ASCII only: a non-breaking space
# belongs to its word), plus the line break and NUL, which a reader refuses.
SEPARATORS = " \t\r\f\v"
_UNWRITABLE_RE = re.compile("[" + re.escape(SEPARATORS) + "\n\x00]")


def unescape_token(token: str) -> str:
    """The word a token stands for: every escape replaced by its bracket."""
    if "-" not in token:
        return token
    return _ESCAPE_RE.sub(lambda m: ESCAPES[m.group(0)], token)


def escape_word(word: str) -> str:
    """The token that writes ``word``; ValueError if no reader could take it back."""
    if not word:
        raise ValueError("cannot write an empty word")
    bad = _UNWRITABLE_RE.search(word)
    if bad:
        raise ValueError(f"cannot write the word {word!r}: it holds {bad.group(0)!r} (white space or NUL)")
    token = word.translate(_ESCAPE_OF)
    if "-" in word and unescape_token(token) != word:
        raise ValueError(
            f"cannot write the word {word!r}: its escaped form {token!r} reads back differently "
            "(the escapes -LRB- -RRB- -LCB- -RCB- -LSB- -RSB- are reserved)"
        )
    return token
