"""Token-level template for shapes sqlglot cannot parse (or should not: too long, too deep).

Works on a *shape* (literals already masked by ``mask.py``), so it never sees a literal value. It
makes keyword case, name case (where the dialect folds it), spacing and signs of masked numbers
uniform, and caps the length, so the result is deterministic and bounded.
"""

from __future__ import annotations

import hashlib
import re
from functools import cache

MAX_TEMPLATE = 4000  # characters kept before the truncation marker

_TOKEN = re.compile(
    r"""'\?'|"(?:[^"]|"")*"?|`(?:[^`]|``)*`?|[A-Za-z_\x80-\uffff][\w$\x80-\uffff]*"""
    r"""|\d+|::|<>|!=|<=|>=|\|\||->>|->|#>>|#>|#-|@>|<@|&&|\?\||\?&|!~\*|!~|~\*|<<|>>|@@|\S""",
    re.DOTALL,
)
_WORD = re.compile(
    r"""'\?'|"(?:[^"]|"")*"?|`(?:[^`]|``)*`?|([A-Za-z_\x80-\uffff][\w$\x80-\uffff]*)""", re.DOTALL
)

# Words written in upper case in templates. sqlglot's keyword table covers most; the rest are
# words it keeps as plain names (window frames, transaction modes, utility commands).
_EXTRA_KEYWORDS = """
ORDER BY GROUP PARTITION ROWS RANGE GROUPS PRECEDING FOLLOWING UNBOUNDED CURRENT ROW ISOLATION
LEVEL READ WRITE ONLY COMMITTED UNCOMMITTED REPEATABLE SERIALIZABLE DEFERRABLE TRANSACTION WORK
SAVEPOINT RELEASE TO ZONE LOCAL SESSION EXPLAIN ANALYZE VERBOSE REFRESH MATERIALIZED VIEW
CONCURRENTLY VACUUM FULL LISTEN NOTIFY UNLISTEN DISCARD DEALLOCATE PREPARE EXECUTE RESET SHOW
NAMES CHARACTER CHARSET AUTOCOMMIT GLOBAL LOCK TABLES UNLOCK NOWAIT SKIP LOCKED SHARE KEY NO
""".split()


@cache
def keywords(dialect: str) -> frozenset[str]:
    """Upper-case keywords of ``dialect`` (sqlglot's tokenizer table, split into words)."""
    from sqlglot.dialects.dialect import Dialect

    name = None if dialect in ("", "generic") else dialect
    table = Dialect.get_or_raise(name).tokenizer_class.KEYWORDS
    words = {w for key in table for w in key.split() if w.isalpha()}
    return frozenset(words | set(_EXTRA_KEYWORDS))


def _digest(text: str) -> str:
    return hashlib.blake2b(text.encode("utf-8", "surrogatepass"), digest_size=8).hexdigest()


def cap(template: str, whole: str | None = None) -> str:
    """Bound a template's length; the marker carries a hash of the whole (literal-free) text."""
    if len(template) <= MAX_TEMPLATE and whole is None:
        return template
    source = template if whole is None else whole
    return f"{template[:MAX_TEMPLATE]} ...[truncated {len(source)} chars, {_digest(source)}]"


def tokens(shape: str) -> list[str]:
    """Split a shape into tokens: masks, quoted names, words, numbers, operators."""
    return _TOKEN.findall(shape)


def _word_case(tok: str, kw: frozenset[str], folds_case: bool) -> str:
    upper = tok.upper()
    if upper in kw:
        return upper
    if folds_case and tok.isascii():
        return tok.lower()
    return tok


def recase(shape: str, kw: frozenset[str], folds_case: bool) -> str:
    """The shape with keyword and name case made uniform; quoted names and spacing untouched."""
    return _WORD.sub(
        lambda m: m.group() if m.group(1) is None else _word_case(m.group(1), kw, folds_case), shape
    )


def normalize_words(shape: str, kw: frozenset[str], folds_case: bool) -> list[str]:
    """Tokens with keywords upper-cased and, where the dialect folds names, names lower-cased."""
    out = []
    for tok in tokens(shape):
        first = tok[0]
        if first.isalpha() or first == "_" or first >= "\x80":
            upper = tok.upper()
            if upper in kw:
                tok = upper
            elif folds_case and tok.isascii():
                tok = tok.lower()
        out.append(tok)
    return out


_WORD_VALUES = frozenset(("NULL", "TRUE", "FALSE"))
_UNARY_BEFORE = frozenset(
    "= < > <= >= <> != ( , [ + - * / % || AND OR NOT WHEN THEN ELSE SELECT".split()
)


def fallback_template(shape: str, kw: frozenset[str], folds_case: bool) -> str:
    """Deterministic template of a shape that sqlglot did not parse.

    >>> fallback_template("select x frm t where a = - '?'", frozenset({"SELECT", "WHERE"}), True)
    'SELECT x frm t WHERE a = ?'
    """
    whole = None
    if len(shape) > 2 * MAX_TEMPLATE:
        whole, shape = shape, shape[: 2 * MAX_TEMPLATE]
    toks = normalize_words(shape, kw, folds_case)
    out: list[str] = []
    for tok in toks:
        if tok in _WORD_VALUES and not (out and out[-1] in ("IS", "NOT")):
            tok = "'?'"  # TRUE/FALSE/NULL as values; after IS [NOT] or NOT they are tests
        if tok == "'?'":
            # A sign in front of a masked value is part of the value: "= -5" and "= 5" match.
            if out and out[-1] == "-" and (len(out) == 1 or out[-2] in _UNARY_BEFORE):
                out.pop()
            out.append("?")
        else:
            out.append(tok)
    text = " ".join(out)
    text = text.replace("( ", "(").replace(" )", ")").replace(" ,", ",").replace(" :: ", "::")
    return cap(text, whole)
