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

Speed: Python's ``re`` tries every alternative at every position unless every top-level
alternative starts with one literal character; then it skips to the next possible first character
in C and rejects the other alternatives by that character. So each rule is written as
``c(rest)`` for each of its first characters (digits give ten alternatives), with look-behinds in
``rest`` for context. TRUE/FALSE/NULL are left to the tree (letters in the scan cost ~40%); the
ORDER BY / GROUP BY rule starts at the rare letter "Y" of BY. Measurements: docs/fingerprints.md.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

MASK = "'?'"

# What a match becomes (the action of the capturing group that matched).
DROP, KEEP, LITERAL, PARAM, LITERAL_OPEN, DROP_OPEN, IN_LIST = range(7)

_NUM_TAIL = r"[\d_]*(?:\.[\d_]*)?(?:[eE][+-]?\d+)?"
_FRACTION = r"\d[\d_]*(?:[eE][+-]?\d+)?"
_SIMPLE_ITEM = r"(?:\d+|[A-Za-z_][\w$]*(?:\.[A-Za-z_][\w$]*)*|\"[^\"]*\"|`[^`]*`)"
_ITEM_TAIL = r"(?:\s+(?i:ASC|DESC))?(?:\s+(?i:NULLS\s+(?:FIRST|LAST)))?"
_LIST_END = (
    r"(?=\s*(?:[,);]|\Z|(?i:LIMIT|OFFSET|FETCH|FOR|HAVING|WINDOW|UNION|INTERSECT|EXCEPT|ROWS|RANGE"
    r"|GROUPS|WITH|ASC|DESC|NULLS|ORDER)(?![\w$])))"
)


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
# TRUE/FALSE/NULL stay in shapes as words (letters would slow the scan down); normalize.py and
# fallback.py mask them where they are values. Literal lists find them in the masked text, in
# order with the masks: TRUE/FALSE/NULL after IS [NOT] or NOT are predicates, not values.
_IN_ORDER = re.compile(
    r"'\?'|(?<![\w$.\"`])(?<![Ii][Ss]\s)(?<![Nn][Oo][Tt]\s)(?i:NULL|TRUE|FALSE)(?![\w$])"
)

# ORDER BY / GROUP BY lists: integers there are column positions, not values, and stay. Found at
# the "Y" of BY, a letter rare enough in SQL to keep this rule in the fast pattern.
_POSITIONS = (
    KEEP,
    "[Yy]",
    rf"(?<![\w$][Bb][Yy])(?<=[Bb][Yy])\s+(?:{_SIMPLE_ITEM}{_ITEM_TAIL}\s*,\s*)*{_SIMPLE_ITEM}{_ITEM_TAIL}{_LIST_END}",
)

_LIST_NUMBER = r"(?:-\s*)?(?:\d[\d_]*(?:\.[\d_]*)?|\.\d[\d_]*)(?:[eE][+-]?\d+)?"
_LIST_PARAM = r"\$\d+|\?|%s"


def _in_list_rule(string: str) -> tuple[int, str, str]:
    """``IN (1, 'a', $1)``: a whole list of plain values as one match (fewer matches, faster)."""
    item = f"(?:{_LIST_NUMBER}|{string}|{_LIST_PARAM})"
    return (
        IN_LIST,
        r"\(",
        rf"(?:(?<=[^\w$][Ii][Nn]\()|(?<=[^\w$][Ii][Nn]\s\())\s*{item}(?:\s*,\s*{item})+\s*\)(?![\w$.(\[:])",
    )


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
        _in_list_rule(r"'[^']*(?:''[^']*)*'"),
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
        _in_list_rule(r"'[^'\\]*(?:(?:\\.|'')[^'\\]*)*'|\"[^\"\\]*(?:(?:\\.|\"\")[^\"\\]*)*\""),
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
        _in_list_rule(r"'[^']*(?:''[^']*)*'"),
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
    """One dialect's combined pattern and the action of each capturing group."""

    name: str
    pattern: re.Pattern[str]
    actions: tuple[int, ...]
    folds_case: bool  # unquoted identifiers are case-insensitive: the shape may be upper-cased
    list_item: re.Pattern[str]  # the values inside an IN_LIST match


def _chars(first: str) -> list[str]:
    """The characters of a first-character class such as ``'``, ``\\d``, ``[Nn]``, ``\\$``."""
    if first == r"\d":
        return list("0123456789")
    if first.startswith("["):
        return list(first[1:-1])
    return [first[-1]]


def _combine(rules: list[tuple[int, str, str]]) -> tuple[re.Pattern[str], tuple[int, ...]]:
    # Every top-level alternative starts with one literal character, so sre both skips to the
    # next possible first character in C and rejects the other alternatives by that character.
    branches = []
    actions = [DROP]  # group 0 is never a lastindex
    for action, first, rest in rules:
        for ch in _chars(first):
            branches.append(f"{re.escape(ch)}({rest})")
            # Inner groups shift the numbering; the outer group of a rule is its lastindex.
            actions += [action] + [KEEP] * re.compile(rest).groups
    return re.compile("|".join(branches), re.DOTALL), tuple(actions)


def _lexer(name: str, rules: list[tuple[int, str, str]], folds_case: bool) -> Lexer:
    pattern, actions = _combine(rules + [_POSITIONS])
    in_list = next(rest for action, _, rest in rules if action == IN_LIST)
    item = re.compile(in_list[in_list.index(r"\s*(?:") + 3 : in_list.index(r"(?:\s*,")])
    return Lexer(name, pattern, actions, folds_case, item)


LEXERS: dict[str, Lexer] = {
    "postgres": _lexer("postgres", _postgres_rules(), True),
    # MySQL table names are case-sensitive on Linux (MariaDB manual, "Identifier Case-sensitivity"):
    # the shape keeps the case of names.
    "mysql": _lexer("mysql", _mysql_rules(), False),
    "sqlite": _lexer("sqlite", _sqlite_rules(), True),
    "generic": _lexer("generic", _generic_rules(), True),
}

_IN_LIST = re.compile(r"\('\?'(?:,\s?'\?')+\)")
_VALUES_ROWS = re.compile(r"((?i:VALUES)\s*(\((?:[^()]|\([^()]*\))*\)))(?:\s*,\s*\2)+")
_SAVEPOINT = re.compile(
    r"\A((?i:SAVEPOINT|RELEASE(?:\s+SAVEPOINT)?|ROLLBACK(?:\s+(?:WORK|TRANSACTION))?\s+TO"
    r"(?:\s+SAVEPOINT)?))\s+(?:[A-Za-z_][\w$]*|\"(?:[^\"]|\"\")*\"|`(?:[^`]|``)*`)\Z"
)
_SAVEPOINT_VERBS = {"SA": "SAVEPOINT", "RE": "RELEASE SAVEPOINT", "RO": "ROLLBACK TO SAVEPOINT"}
_E_PREFIX = re.compile(r"(?<![\w$])[Ee]'\?'")


class Masker:
    """Masks statements of one dialect; collects literal tokens when asked to.

    ``open`` is set when the last statement ended inside an unterminated string, quoted name or
    comment (then its tail was masked or dropped as a whole).
    """

    def __init__(self, lexer: Lexer, keep_literals: bool) -> None:
        self.lexer = lexer
        self.keep_literals = keep_literals
        self.values: tuple[str, ...] = ()  # literal tokens of the last statement (keep_literals)
        self.open = False
        actions = lexer.actions
        found: list[str | None] = []
        self._found = found
        append = found.append
        list_items = lexer.list_item.finditer

        def replace(m: re.Match[str]) -> str:
            action = actions[m.lastindex]  # type: ignore[index]
            if action == LITERAL or action == PARAM:
                return MASK
            if action == DROP:
                return " "
            if action == KEEP:
                return m.group()
            if action == IN_LIST:
                return "('?')"
            self.open = True
            return MASK if action == LITERAL_OPEN else " "

        def replace_keeping(m: re.Match[str]) -> str:
            action = actions[m.lastindex]  # type: ignore[index]
            if action == LITERAL:
                token = m.group()
                append(token if token[0] != "-" else "-" + token[1:].strip())
                return MASK
            if action == PARAM:
                append(None)  # a mask that carries no value
                return MASK
            if action == DROP:
                return " "
            if action == KEEP:
                return m.group()
            if action == IN_LIST:
                count = 0
                for item in list_items(m.group(1)):
                    token = item.group()
                    count += 1
                    if token[0] in "$?%":
                        append(None)
                    else:
                        append(token if token[0] != "-" else "-" + token[1:].strip())
                # One mask per value keeps the literal order; finish() collapses the list.
                return "(" + ", ".join([MASK] * count) + ")"
            self.open = True
            if action == LITERAL_OPEN:
                append(m.group())
                return MASK
            return " "

        self._sub = lexer.pattern.sub
        self._replace = replace_keeping if keep_literals else replace

    def mask(self, sql: str) -> str:
        """Literals to ``'?'`` and comments to a space; nothing else is changed."""
        self.open = False
        if not self.keep_literals:
            return self._sub(self._replace, sql)
        found = self._found
        found.clear()
        masked = self._sub(self._replace, sql)
        low = masked.lower()
        if "null" in low or "true" in low or "false" in low:
            tokens = iter(found)
            values = []
            for m in _IN_ORDER.finditer(masked):
                token = next(tokens, None) if m.group() == MASK else m.group()
                if token is not None:
                    values.append(token)
            self.values = tuple(values)
        elif None in found:
            self.values = tuple([t for t in found if t is not None])
        else:
            self.values = tuple(found)
        return masked

    def shape(self, sql: str) -> str:
        """The statement's shape (see the module docstring).

        >>> Masker(LEXERS["postgres"], False).shape("select a from t where id in (1, 2,3) and b = 'x' /*c*/")
        "SELECT A FROM T WHERE ID IN ('?') AND B = '?'"
        """
        return finish(self.mask(sql), self.lexer.folds_case)


def _in_list(m: re.Match[str]) -> str:
    before = m.string[max(0, m.start() - 4) : m.start()].rstrip()
    if before[-2:] in ("IN", "in", "In", "iN") and (len(before) < 3 or not before[-3].isalnum()):
        return "('?')"
    return m.group()


def finish(masked: str, folds_case: bool) -> str:
    """Collapse whitespace, case, IN lists, repeated VALUES rows and savepoint names of a mask."""
    if '"' in masked or "`" in masked or "[" in masked or not masked.isascii():
        masked = masked.strip()  # quoted names keep their inner spaces and case
    else:
        masked = " ".join(masked.split())
        if folds_case:
            masked = masked.upper()
    while masked.endswith(";"):
        masked = masked[:-1].rstrip()
    if "('?'," in masked:
        masked = _IN_LIST.sub(_in_list, masked)
    if "), (" in masked or "),(" in masked:
        at = (masked if folds_case else masked.upper()).find("VALUES")
        if at >= 0:
            m = _VALUES_ROWS.match(masked, at)
            if m is not None:
                masked = masked[:at] + m.group(1) + masked[m.end() :]
    if "E'?'" in masked or "e'?'" in masked:
        masked = _E_PREFIX.sub(MASK, masked)  # E'...' and '...' are both string values
    if masked[:1] in "SsRr":
        m = _SAVEPOINT.match(masked)
        if m is not None:
            # One spelling per verb: WORK/TRANSACTION and the word SAVEPOINT are optional
            # (PostgreSQL manual, ROLLBACK TO SAVEPOINT and RELEASE SAVEPOINT).
            verb = m.group(1)[:2].upper()
            masked = _SAVEPOINT_VERBS[verb] + " " + MASK
    return masked
