"""The fast pass: every literal masked in one regular-expression scan per statement.

A statement becomes its *shape*: literals and bind parameters replaced by the mask ``'?'``, comments
removed, whitespace collapsed, IN lists and repeated VALUES rows reduced to one item. sqlglot then
runs once per distinct shape (see ``normalize.py``), not once per statement.

A shape only has to be *at least as fine* as the final template: two statements with one shape must
get one template (so masking never drops anything that can change the result), while two shapes may
still end up with one template once sqlglot has normalised them.

The mask is the string literal ``'?'``: sqlglot parses a string literal wherever a value may stand
(``'?'::int``, ``interval '?'``, ``LIMIT '?'``) in every dialect, whereas ``?`` and ``$1`` fail in
some of those places (measured, see docs/fingerprints.md). After masking no other string literal is
left in a shape.

Speed: Python's ``re`` tries every alternative at every position unless the pattern starts with a
character set, in which case it skips to the next character of that set in C. So the combined
pattern is ``[first characters](?:(?<=c1)rest1|(?<=c2)rest2|...)``: the first character is consumed
by the set and a one-character look-behind picks the alternative (about 10x faster than a plain
alternation here). Letter-led rules (TRUE/FALSE/NULL, ORDER BY positions) live in a second, slower
pattern used only for statements that contain those words.
"""

from __future__ import annotations

import re
from collections.abc import Callable
from dataclasses import dataclass

MASK = "'?'"

# What a match becomes (the action of the capturing group that matched).
DROP, KEEP, LITERAL, PARAM, LITERAL_OPEN, DROP_OPEN = range(6)

_NUM_TAIL = r"[\d_]*(?:\.[\d_]*)?(?:[eE][+-]?\d+)?"
_FRACTION = r"\d[\d_]*(?:[eE][+-]?\d+)?"
_SIMPLE_ITEM = r"(?:\d+|[A-Za-z_][\w$]*(?:\.[A-Za-z_][\w$]*)*|\"[^\"]*\"|`[^`]*`)"
_ITEM_TAIL = r"(?:\s+(?i:ASC|DESC))?(?:\s+(?i:NULLS\s+(?:FIRST|LAST)))?"
_LIST_END = (
    r"(?=\s*(?:[,);]|\Z|(?i:LIMIT|OFFSET|FETCH|FOR|HAVING|WINDOW|UNION|INTERSECT|EXCEPT|ROWS|RANGE"
    r"|GROUPS|WITH|ASC|DESC|NULLS|ORDER)(?![\w$])))"
)


def _word_value(word: str) -> str:
    """TRUE/FALSE/NULL as a value, not inside a name and not after IS [NOT] / NOT (predicates)."""
    first, rest = word[0], word[1:]
    letters = "".join(f"[{c.upper()}{c.lower()}]" for c in rest)
    cls = f"[{first.upper()}{first.lower()}]"
    return rf"(?<![\w$.\"`]{cls})(?<![Ii][Ss]\s{cls})(?<![Nn][Oo][Tt]\s{cls}){letters}(?![\w$])"


# Rules shared by every dialect, as (action, first character class, rest of the pattern).
_NUMBERS = [
    (LITERAL, r"\d", rf"(?<![\w$.]\d)(?:(?<=0)[xX][0-9A-Fa-f_]+|(?<=0)[bBoO][0-7_]+|{_NUM_TAIL})"),
    (LITERAL, r"\.", rf"(?<![\w$.)\]\"`]\.){_FRACTION}"),
    # A sign right after an operator, an opening bracket or a comma belongs to the number.
    (LITERAL, "-", rf"(?:(?<=[=<>(,\[]-)|(?<=[=<>(,\[]\s-))\s*(?:\d{_NUM_TAIL}|\.{_FRACTION})"),
]
_COMMON_PARAMS = [
    (PARAM, "%", r"s|\([^()]*\)s"),
    (PARAM, ":", r"(?<![:\w]:)[A-Za-z_]\w*"),
]
_BLOCK_COMMENT = [(DROP, "/", r"\*.*?\*/"), (DROP_OPEN, "/", r"\*.*")]
_WORDS = [
    (LITERAL, "[Nn]", _word_value("null")),
    (LITERAL, "[Tt]", _word_value("true")),
    (LITERAL, "[Ff]", _word_value("false")),
    # ORDER BY / GROUP BY lists: integers there are column positions, not values, and stay.
    (
        KEEP,
        "[Bb]",
        rf"(?<![\w$][Bb])[Yy]\s+(?:{_SIMPLE_ITEM}{_ITEM_TAIL}\s*,\s*)*{_SIMPLE_ITEM}{_ITEM_TAIL}{_LIST_END}",
    ),
]

_SQ_STANDARD = [(LITERAL, "'", r"[^']*(?:''[^']*)*'"), (LITERAL_OPEN, "'", r".*")]
_SQ_BACKSLASH = [
    (LITERAL, "'", r"[^'\\]*(?:(?:\\.|'')[^'\\]*)*'"),
    (LITERAL_OPEN, "'", r".*"),
]
_DQ_IDENT = [(KEEP, '"', r'[^"]*(?:""[^"]*)*"'), (LITERAL_OPEN, '"', r".*")]
_BACKTICK_IDENT = [(KEEP, "`", r"[^`]*(?:``[^`]*)*`"), (LITERAL_OPEN, "`", r".*")]


def _postgres_rules() -> list[tuple[int, str, str]]:
    # PostgreSQL manual, 4.1.2.1 String Constants, 4.1.2.2 String Constants with C-Style Escapes
    # (E'...' with backslash escapes), 4.1.2.3 Unicode escapes (U&'...'), 4.1.2.4 Dollar-Quoted
    # String Constants, 4.1.2.5 Bit-String Constants, 4.1.2.6 Numeric Constants (0x/0o/0b and
    # underscores since 16), 4.1.5 Comments, 4.2.2 Positional Parameters ($n).
    return [
        # E'...': backslash escapes; picked by looking behind the quote for a lone E.
        (LITERAL, "'", r"(?<![\w$][Ee]')(?<=[Ee]')[^'\\]*(?:(?:\\.|'')[^'\\]*)*'"),
        (LITERAL_OPEN, "'", r"(?<![\w$][Ee]')(?<=[Ee]').*"),
        *_SQ_STANDARD,
        *_NUMBERS,
        *_BLOCK_COMMENT,
        (DROP, "-", r"-[^\n]*"),
        *_DQ_IDENT,
        (LITERAL, r"\$", r"(?<![\w$]\$)\$.*?\$\$"),
        (
            LITERAL,
            r"\$",
            r"(?<![\w$]\$)(?P<tag>[A-Za-z_\x80-\uffff][\w\x80-\uffff]*)\$.*?\$(?P=tag)\$",
        ),
        (LITERAL_OPEN, r"\$", r"(?<![\w$]\$)(?:[A-Za-z_\x80-\uffff][\w\x80-\uffff]*)?\$.*"),
        (PARAM, r"\$", r"(?<![\w$]\$)\d+"),
        (PARAM, r"\?", r"(?![|&])\d*"),  # ?| and ?& are jsonb operators
        *_COMMON_PARAMS,
    ]


def _mysql_rules() -> list[tuple[int, str, str]]:
    # MariaDB manual: "String Literals" (backslash escapes, '' and "" doubling; "..." is a string
    # unless ANSI_QUOTES), "Identifier Names" (backticks), "Comment Syntax" (#, "-- " followed by
    # whitespace, /* */), "Hexadecimal Literals", "Binary Literals".
    return [
        *_SQ_BACKSLASH,
        *_NUMBERS,
        *_BLOCK_COMMENT,
        (DROP, "-", r"-(?=[ \t\r\n]|\Z)[^\n]*"),
        (DROP, "#", r"[^\n]*"),
        (LITERAL, '"', r'[^"\\]*(?:(?:\\.|"")[^"\\]*)*"'),
        (LITERAL_OPEN, '"', r".*"),
        *_BACKTICK_IDENT,
        (PARAM, r"\?", r""),
        *_COMMON_PARAMS,
    ]


def _sqlite_rules() -> list[tuple[int, str, str]]:
    # SQLite documentation, "SQL Language Expressions" (literals; parameters ?NNN :AAA @AAA $AAA)
    # and "SQLite Keywords" (identifiers quoted with "", `` or []).
    return [
        *_SQ_STANDARD,
        *_NUMBERS,
        *_BLOCK_COMMENT,
        (DROP, "-", r"-[^\n]*"),
        *_DQ_IDENT,
        *_BACKTICK_IDENT,
        (KEEP, r"\[", r"[^\]]*\]"),
        (LITERAL_OPEN, r"\[", r".*"),
        (PARAM, r"\?", r"\d*"),
        (PARAM, r"[@$]", r"(?<![\w$][@$])[A-Za-z_]\w*"),
        *_COMMON_PARAMS,
    ]


def _generic_rules() -> list[tuple[int, str, str]]:
    return _postgres_rules() + _BACKTICK_IDENT


@dataclass(frozen=True)
class Lexer:
    """One dialect's combined patterns and the action of each capturing group."""

    name: str
    fast: re.Pattern[str]  # without the letter-led rules
    full: re.Pattern[str]  # with TRUE/FALSE/NULL and ORDER BY positions
    fast_actions: tuple[int, ...]
    full_actions: tuple[int, ...]
    folds_case: bool  # unquoted identifiers are case-insensitive: the shape may be upper-cased


def _combine(rules: list[tuple[int, str, str]]) -> tuple[re.Pattern[str], tuple[int, ...]]:
    firsts = "".join(dict.fromkeys(c[1:-1] if c.startswith("[") else c for _, c, _ in rules))
    firsts = firsts.replace("-", "") + "\\-"  # a bare "-" inside [...] would make a range
    branches = []
    actions = [DROP]  # group 0 is never a lastindex
    for action, first, rest in rules:
        branches.append(f"(?<={first})({rest})")
        # Inner groups shift the numbering; the outer group of a branch is its lastindex.
        actions += [action] + [KEEP] * re.compile(rest).groups
    pattern = f"[{firsts}](?:{'|'.join(branches)})"
    return re.compile(pattern, re.DOTALL), tuple(actions)


def _lexer(name: str, rules: list[tuple[int, str, str]], folds_case: bool) -> Lexer:
    fast, fast_actions = _combine(rules)
    full, full_actions = _combine(rules + _WORDS)
    return Lexer(name, fast, full, fast_actions, full_actions, folds_case)


LEXERS: dict[str, Lexer] = {
    "postgres": _lexer("postgres", _postgres_rules(), True),
    # MySQL table names are case-sensitive on Linux (MariaDB manual, "Identifier Case-sensitivity"):
    # the shape keeps the case of names.
    "mysql": _lexer("mysql", _mysql_rules(), False),
    "sqlite": _lexer("sqlite", _sqlite_rules(), True),
    "generic": _lexer("generic", _generic_rules(), True),
}

_IN_LIST = re.compile(r"(?i:\bIN)\s*\(\s*'\?'(?:\s*,\s*'\?')+\s*\)")
_VALUES_ROWS = re.compile(r"((?i:\bVALUES)\s*(\((?:[^()]|\([^()]*\))*\)))(?:\s*,\s*\2)+")
_SAVEPOINT = re.compile(
    r"\A((?i:SAVEPOINT|RELEASE(?:\s+SAVEPOINT)?|ROLLBACK(?:\s+(?:WORK|TRANSACTION))?\s+TO"
    r"(?:\s+SAVEPOINT)?))\s+(?:[A-Za-z_][\w$]*|\"(?:[^\"]|\"\")*\"|`(?:[^`]|``)*`)\Z"
)
_WORD_HINTS = ("null", "true", "false", "by")


class Masker:
    """Masks statements of one dialect; collects literal tokens when asked to.

    ``open`` is set when the last statement ended inside an unterminated string, quoted name or
    comment (then its tail was masked or dropped as a whole).
    """

    def __init__(self, lexer: Lexer, keep_literals: bool) -> None:
        self.lexer = lexer
        self.literals: list[str] = []
        self.open = False
        fast_actions, full_actions = lexer.fast_actions, lexer.full_actions
        append = self.literals.append

        def make(actions: tuple[int, ...]) -> Callable[[re.Match[str]], str]:
            def replace(m: re.Match[str]) -> str:
                action = actions[m.lastindex]  # type: ignore[index]
                if action == LITERAL:
                    if keep_literals:
                        token = m.group()
                        append("-" + token[1:].strip() if token[0] == "-" else token)
                    return MASK
                if action == PARAM:
                    return MASK
                if action == DROP:
                    return " "
                if action == KEEP:
                    return m.group()
                self.open = True
                if action == LITERAL_OPEN:
                    if keep_literals:
                        append(m.group())
                    return MASK
                return " "

            return replace

        self._fast_sub = lexer.fast.sub
        self._full_sub = lexer.full.sub
        self._fast_repl = make(fast_actions)
        self._full_repl = make(full_actions)

    def mask(self, sql: str) -> str:
        """Literals to ``'?'`` and comments to a space; nothing else is changed."""
        self.open = False
        low = sql.lower()
        if "null" in low or "true" in low or "false" in low or "by" in low:
            return self._full_sub(self._full_repl, sql)
        return self._fast_sub(self._fast_repl, sql)

    def shape(self, sql: str) -> str:
        """The statement's shape (see the module docstring).

        >>> Masker(LEXERS["postgres"], False).shape("select a from t where id in (1, 2,3) and b = 'x' /*c*/")
        "SELECT A FROM T WHERE ID IN ('?') AND B = '?'"
        """
        return finish(self.mask(sql), self.lexer.folds_case)


def finish(masked: str, folds_case: bool) -> str:
    """Collapse whitespace, case, IN lists, repeated VALUES rows and savepoint names of a mask."""
    if '"' in masked or "`" in masked or "[" in masked:
        masked = masked.strip()  # quoted names keep their inner spaces and case
    else:
        masked = " ".join(masked.split())
        if folds_case:
            masked = masked.upper()
    while masked.endswith(";"):
        masked = masked[:-1].rstrip()
    if "'?'," in masked or "'?' ," in masked:
        if "IN" in masked or "in" in masked or "In" in masked or "iN" in masked:
            masked = _IN_LIST.sub("IN ('?')", masked)
        if "), (" in masked or "),(" in masked or ") ," in masked:
            masked = _VALUES_ROWS.sub(r"\1", masked)
    if masked[:1] in "SsRr":
        m = _SAVEPOINT.match(masked)
        if m is not None:
            masked = " ".join(m.group(1).upper().split()) + " " + MASK
    return masked
