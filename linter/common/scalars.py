"""Typing of plain scalars from their raw text, under each reader a file may meet.

The readers (settings ``yaml_version`` and ``readers``; tests/test_dialects.py checks each against
a library that implements it):

- ``"1.2"``: the YAML 1.2 core schema (YAML 1.2.2, section 10.3.2).
- ``"1.1"``: the implicit types of the YAML 1.1 type repository (bool, int, float, null,
  timestamp), in the form most loaders of that version implement them (exponent sign required, a
  digit before the point, ``_`` allowed, base-60 numbers, ``0``-prefixed octal).
- ``"1.1+floats"``: YAML 1.1 with the float fix several widely used config libraries ship: a float
  may have an exponent without a point (``1e-6``) or without its sign (``1.0e5``), and dates and
  timestamps stay text.
- ``"json"``: JSON's own grammar (RFC 8259, section 6 for numbers; ``true``, ``false``, ``null``).
"""
from __future__ import annotations

import math

from .patterns import later  # compiled on first use: a file without dates never compiles the date patterns

# Integers at or past this magnitude are not read as numbers (they stay text, and the loader
# reports them: YML-5). Python cannot print an integer of more than 4300 digits, converting a long
# literal costs time quadratic in its length, and no count, size or seed of a run comes near it.
MAX_INT = 10 ** 30
MAX_INT_TEXT = 26  # a plain scalar of at most this many characters never reads as an integer past MAX_INT
_MAX_DIGITS = 120  # longer digit strings (leading zeros and '_' aside) are past MAX_INT in any base
# perf: every integer form of both schemas (_N11_INT, _N12_INT10/8/16) opens with a sign or a digit; the
# long plain scalars of a config (paths, names, sentences, ~20 a file) are told apart by their first
# character instead of four pattern matches
_INT_FIRST = frozenset("+-0123456789")


def _whole(digits: str, base: int):
    """int(digits, base) when below MAX_INT, else None (never converts a long literal)."""
    digits = digits.lstrip("0") or "0"
    if len(digits) > _MAX_DIGITS:
        return None
    value = int(digits, base)
    return value if value < MAX_INT else None


def oversized(text: str) -> bool:
    """Does a plain scalar read, under YAML 1.1 or 1.2, as an integer too large for trimtab?"""
    if len(text) <= MAX_INT_TEXT or text[0] not in _INT_FIRST:
        return False
    return (bool(_N11_INT.fullmatch(text)) and isinstance(type11(text), str)) or (
        bool(_N12_INT10.fullmatch(text) or _N12_INT8.fullmatch(text) or _N12_INT16.fullmatch(text))
        and isinstance(type12(text), str))


# --- YAML 1.2 core schema ---------------------------------------------------------------
_N12_NULL = later(r"null|Null|NULL|~|")
_N12_TRUE = later(r"true|True|TRUE")
_N12_FALSE = later(r"false|False|FALSE")
_N12_INT10 = later(r"[-+]?[0-9]+")
_N12_INT8 = later(r"0o[0-7]+")
_N12_INT16 = later(r"0x[0-9a-fA-F]+")
_N12_FLOAT = later(r"[-+]?(\.[0-9]+|[0-9]+(\.[0-9]*)?)([eE][-+]?[0-9]+)?")
_N12_INF = later(r"[-+]?\.(inf|Inf|INF)")
_N12_NAN = later(r"\.(nan|NaN|NAN)")


def type12(text: str):
    """The value of a plain scalar under the YAML 1.2 core schema."""
    if _N12_NULL.fullmatch(text):
        return None
    if _N12_TRUE.fullmatch(text):
        return True
    if _N12_FALSE.fullmatch(text):
        return False
    if _N12_INT10.fullmatch(text):
        v = _whole(text.lstrip("+-"), 10)
        return text if v is None else -v if text[0] == "-" else v
    if _N12_INT8.fullmatch(text):
        v = _whole(text[2:], 8)
        return text if v is None else v
    if _N12_INT16.fullmatch(text):
        v = _whole(text[2:], 16)
        return text if v is None else v
    if _N12_FLOAT.fullmatch(text):
        return float(text)
    if _N12_INF.fullmatch(text):
        return -math.inf if text[0] == "-" else math.inf
    if _N12_NAN.fullmatch(text):
        return math.nan
    return text


# --- YAML 1.1 type repository -------------------------------------------------------------
_N11_BOOL_TRUE = frozenset("yes Yes YES true True TRUE on On ON".split())
_N11_BOOL_FALSE = frozenset("no No NO false False FALSE off Off OFF".split())
_N11_NULL = later(r"~|null|Null|NULL|")
_N11_INT = later(
    r"[-+]?0b[0-1_]+|[-+]?0[0-7_]+|[-+]?(?:0|[1-9][0-9_]*)|[-+]?0x[0-9a-fA-F_]+"
    r"|[-+]?[1-9][0-9_]*(?::[0-5]?[0-9])+"
)
_N11_FLOAT = later(
    r"[-+]?(?:[0-9][0-9_]*)\.[0-9_]*(?:[eE][-+][0-9]+)?|\.[0-9_]+(?:[eE][-+][0-9]+)?"
    r"|[-+]?[0-9][0-9_]*(?::[0-5]?[0-9])+\.[0-9_]*|[-+]?\.(?:inf|Inf|INF)|\.(?:nan|NaN|NAN)"
)
_N11_DATE = later(r"([0-9]{4})-([0-9]{2})-([0-9]{2})")
_N11_TIMESTAMP = later(
    r"([0-9]{4})-([0-9]{1,2})-([0-9]{1,2})(?:[Tt]|[ \t]+)([0-9]{1,2}):([0-9]{2}):([0-9]{2})"
    r"(?:\.([0-9]*))?(?:[ \t]*(Z|[-+][0-9]{1,2}(?::[0-9]{2})?))?"
)


def _sexagesimal(text: str, cast):
    sign = -1 if text[0] == "-" else 1
    parts = text.lstrip("+-").split(":")
    if cast is int and len(parts) > 20:  # 60 ** 17 > MAX_INT already
        return None
    value = 0
    for part in parts:
        value = value * 60 + cast(part)
    if cast is int and value >= MAX_INT:
        return None
    return sign * value


def type11(text: str):
    """The value of a plain scalar under the YAML 1.1 implicit types."""
    if text in _N11_BOOL_TRUE:
        return True
    if text in _N11_BOOL_FALSE:
        return False
    if _N11_NULL.fullmatch(text):
        return None
    if _N11_INT.fullmatch(text):
        clean = text.replace("_", "")
        sign = -1 if clean[0] == "-" else 1
        body = clean.lstrip("+-")
        if ":" in body:
            v = _sexagesimal(body, int)
        elif body.startswith("0b"):
            v = _whole(body[2:], 2)
        elif body.startswith("0x"):
            v = _whole(body[2:], 16)
        elif len(body) > 1 and body[0] == "0":
            v = _whole(body, 8)
        else:
            v = _whole(body, 10)
        return text if v is None else sign * v
    if _N11_FLOAT.fullmatch(text):
        return _float11(text)
    m = _N11_DATE.fullmatch(text)
    if m:
        import datetime  # rare: only dates and timestamps need it (start-up)

        try:
            return datetime.date(int(m[1]), int(m[2]), int(m[3]))
        except ValueError:
            return text
    m = _N11_TIMESTAMP.fullmatch(text)
    if m:
        import datetime

        try:
            frac = (m[7] or "0")[:6].ljust(6, "0")
            tz = None
            if m[8]:
                if m[8] == "Z":
                    tz = datetime.timezone.utc
                else:
                    hh, _, mm = m[8][1:].partition(":")
                    delta = datetime.timedelta(hours=int(hh), minutes=int(mm or 0))
                    tz = datetime.timezone(-delta if m[8][0] == "-" else delta)
            return datetime.datetime(int(m[1]), int(m[2]), int(m[3]), int(m[4]), int(m[5]),
                                     int(m[6]), int(frac), tzinfo=tz)
        except ValueError:
            return text
    return text


def _float11(text: str) -> float:
    """A YAML 1.1 float's value (the text matched a float pattern)."""
    clean = text.replace("_", "").lower()
    if clean.endswith(".inf"):
        return -math.inf if clean[0] == "-" else math.inf
    if clean == ".nan":
        return math.nan
    if ":" in clean:
        sign = -1 if clean[0] == "-" else 1
        return sign * _sexagesimal(clean.lstrip("+-"), float)
    return float(clean)


# --- YAML 1.1 with the float fix ----------------------------------------------------------------
# The float pattern such config libraries add after the YAML 1.1 ones (so a 1.1 reading that is
# not text still wins): the exponent's sign is optional, and an exponent needs no point.
_N11F_FLOAT = later(
    r"[-+]?[0-9]+(?:_[0-9]+)*\.[0-9_]*(?:[eE][-+]?[0-9]+)?|[-+]?[0-9]+(?:_[0-9]+)*(?:[eE][-+]?[0-9]+)"
    r"|\.[0-9]+(?:_[0-9]+)*(?:[eE][-+][0-9]+)?|[-+]?[0-9]+(?:_[0-9]+)*(?::[0-5]?[0-9])+\.[0-9_]*"
    r"|[-+]?\.(?:inf|Inf|INF)|\.(?:nan|NaN|NAN)"
)


def type11f(text: str):
    """The value of a plain scalar under YAML 1.1 with the float fix (dates and timestamps stay text)."""
    value = type11(text)
    if isinstance(value, str):
        return _float11(text) if _N11F_FLOAT.fullmatch(text) else value
    if value is None or isinstance(value, (bool, int, float)):
        return value
    return text  # a date or timestamp: such readers drop those types


# --- JSON (RFC 8259) ------------------------------------------------------------------------------
_JSON_NUMBER = later(r"(-?)(0|[1-9][0-9]*)(\.[0-9]+)?([eE][-+]?[0-9]+)?")
_JSON_WORDS = {"true": True, "false": False, "null": None}


def typejson(text: str):
    """The value of a JSON literal or number as written (RFC 8259, sections 3 and 6): an integer
    has neither fraction nor exponent; any other number is a float."""
    if text in _JSON_WORDS:
        return _JSON_WORDS[text]
    m = _JSON_NUMBER.fullmatch(text)
    if m is None:
        return text
    if m[3] is None and m[4] is None:
        v = _whole(m[2], 10)
        return text if v is None else -v if m[1] else v
    return float(text)


READERS = {"1.2": type12, "1.1": type11, "1.1+floats": type11f, "json": typejson}
# How each reader is named in messages
READER_NAMES = {"1.2": "YAML 1.2", "1.1": "YAML 1.1", "1.1+floats": "YAML 1.1 with the float fix",
                "json": "JSON"}


_EXPLICIT = {
    "tag:yaml.org,2002:str": str,
    "tag:yaml.org,2002:int": "int",
    "tag:yaml.org,2002:float": "float",
    "tag:yaml.org,2002:bool": "bool",
    "tag:yaml.org,2002:null": "null",
}


# perf: runs repeat the same scalars from file to file; a short scalar's typing is kept (bounded:
# emptied when full, so memory stays flat over any number of files). Every value typed is immutable.
_TYPED: dict[tuple, object] = {}
_TYPED_TEXT = 64
_TYPED_SIZE = 8192
# perf: a plain untagged scalar (nearly every one) is kept by its text alone, one table per reader
_PLAIN: dict[str, dict[str, object]] = {version: {} for version in READERS}


def typed(text: str, plain: bool, tag: str | None, version: str):
    """Type a scalar. Quoted and block scalars are strings unless explicitly tagged;
    an explicit standard tag types the text as that tag. An integer of MAX_INT or more stays text
    (the loader reports it) rather than stopping the check."""
    if tag is None:
        if not plain:
            return text
        memo = _PLAIN.get(version)
        if memo is not None and len(text) <= _TYPED_TEXT:
            hit = memo.get(text, memo)
            if hit is memo:
                try:
                    hit = _typed(text, True, None, version)
                except ValueError:
                    hit = text
                if len(memo) >= _TYPED_SIZE:
                    memo.clear()
                memo[text] = hit
            return hit
    key = (text, plain, tag, version) if len(text) <= _TYPED_TEXT else None
    if key is not None:
        hit = _TYPED.get(key, _TYPED)
        if hit is not _TYPED:
            return hit
    try:
        value = _typed(text, plain, tag, version)
    except ValueError:
        value = text
    if key is not None:
        if len(_TYPED) >= _TYPED_SIZE:
            _TYPED.clear()
        _TYPED[key] = value
    return value


def _typed(text: str, plain: bool, tag: str | None, version: str):
    reader = READERS.get(version, type11)
    if tag and tag != "?" and tag != "!" and tag in _EXPLICIT:
        kind = _EXPLICIT[tag]
        if kind is str:
            return text
        value = reader(text)
        want = {"int": int, "float": float, "bool": bool, "null": type(None)}[str(kind)]
        if kind == "float" and isinstance(value, int) and not isinstance(value, bool):
            return float(value)
        return value if isinstance(value, want) and not (kind == "int" and isinstance(value, bool)) else text
    if tag and tag not in ("?", "!") and not tag.startswith("tag:yaml.org,2002:"):
        return text  # a local tag: the application decides; we read the text
    if not plain or tag == "!":
        return text
    return reader(text)


def same_value(a, b) -> bool:
    """Do two readings agree (type and value; NaN equals NaN)?"""
    if type(a) is not type(b):
        return False
    if isinstance(a, float) and math.isnan(a) and math.isnan(b):
        return True
    return a == b


YAML_READERS = ("1.1", "1.1+floats", "1.2")


def _number(x) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool)


def misreaders(read, reader: str | None, fits) -> list[str]:
    """The YAML readers that read a plain scalar other than it is meant, of ``reader`` (the one the
    settings name for its file) or, when None, of every YAML reader the file may meet. ``read``:
    reader -> the scalar's value under it (``Scalar.value``).

    A reader misreads a value that the readers do not all read alike when its reading does not fit
    the concept (``fits``: the concept's type) while another reader's does (``3e-6`` as text for a
    rate under YAML 1.1; ``off`` as text for a switch under YAML 1.2), or when it reads a number
    other than the YAML 1.2 core schema does and both fit (``010`` as octal 8 under YAML 1.1).
    A reader whose reading is the one that fits sees nothing wrong, whatever the others read."""
    readings = {r: read(r) for r in YAML_READERS}
    core = readings["1.2"]
    out = []
    for r in (YAML_READERS if reader is None else (reader,)):
        mine = readings.get(r)
        if mine is None:
            continue
        others = [v for o, v in readings.items() if o != r]
        if all(same_value(mine, v) for v in others):
            continue
        if not fits(mine) and any(fits(v) for v in others):
            out.append(r)
        elif fits(mine) and _number(mine) and _number(core) and fits(core) and not same_value(mine, core):
            out.append(r)
    return out
