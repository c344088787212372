"""C spellings of user strings: string literals, comment text and identifiers.

Every user string (feature name, level, class label, model name) is hostile. In a
string literal each byte outside printable ASCII, and each of `"`, `\\` and `?`
(trigraphs are live in C99), becomes a three-digit octal escape, which unlike
`\\x` cannot swallow the characters after it. Comment text uses the same form
and also escapes `*` and `/`, so no name can end or open a comment; newlines are
escaped, so no name can start a preprocessor line.
"""

from __future__ import annotations

import re

from ..errors import ScorewrightError

_LITERAL_SAFE = frozenset(chr(c) for c in range(0x20, 0x7F)) - set('"\\?')
_COMMENT_SAFE = _LITERAL_SAFE - set("*/")

# C99 and C++ keywords, and lowercase names GCC predefines as macros in GNU modes.
RESERVED = frozenset("""
auto break case char const continue default do double else enum extern float for goto if
inline int long register restrict return short signed sizeof static struct switch typedef
union unsigned void volatile while _Bool _Complex _Imaginary bool true false alignas alignof
and and_eq asm bitand bitor catch char16_t char32_t char8_t class compl concept consteval
constexpr constinit const_cast co_await co_return co_yield decltype delete dynamic_cast
explicit export friend mutable namespace new noexcept not not_eq nullptr operator or or_eq
private protected public reinterpret_cast requires static_assert static_cast template this
thread_local throw try typeid typename using virtual wchar_t xor xor_eq linux unix i386
errno assert
""".split())

_IDENTIFIER = re.compile(r"[A-Za-z][A-Za-z0-9_]*\Z")


def _escaped(text: str, safe: frozenset) -> str:
    out = []
    for ch in text:
        if ch in safe:
            out.append(ch)
        else:
            out.extend(f"\\{byte:03o}" for byte in ch.encode("utf-8"))
    return "".join(out)


def string_literal(text: str) -> str:
    """A C string literal holding exactly the UTF-8 bytes of `text`."""
    return '"' + _escaped(text, _LITERAL_SAFE) + '"'


def comment_text(text) -> str:
    """`text` quoted for use inside a /* */ comment: it cannot end the comment."""
    return '"' + _escaped(str(text), _COMMENT_SAFE) + '"'


def check_prefix(prefix: str) -> str:
    """A user's --prefix, refused unless it is a plain C identifier."""
    if not _IDENTIFIER.match(prefix) or len(prefix) > 48:
        raise ScorewrightError(
            f"--prefix {prefix!r}: not a C identifier (a letter, then letters, digits or _; "
            f"at most 48 characters)")
    if prefix in RESERVED:
        raise ScorewrightError(f"--prefix {prefix!r}: a C or C++ keyword")
    return prefix


def default_prefix(stem: str) -> str:
    """The symbol prefix derived from the plan's file stem."""
    name = re.sub(r"[^A-Za-z0-9]+", "_", stem).strip("_")[:48] or "model"
    if not name[0].isalpha():
        name = "m_" + name
    return name + "_" if name in RESERVED else name


def field_names(names) -> list[str]:
    """One distinct, safe struct member name per feature name.

    All-capital spellings are lowered (capitals are the spelling of macros, which
    some header may define); keywords and predefined macro names get a trailing
    underscore; clashes get the feature's index.
    """
    out: list[str] = []
    for index, name in enumerate(names):
        field = re.sub(r"[^A-Za-z0-9]+", "_", name).strip("_")[:40] or f"feature_{index}"
        if field.upper() == field:
            field = field.lower()
        if not field[0].isalpha():
            field = "f_" + field
        if field in RESERVED:
            field += "_"
        if field in out:
            field = f"{field}_{index}"
        while field in out:
            field += "_"
        out.append(field)
    return out
