"""The input rules every reader shares: reading a text file, TOML documents, numbers and ids.

One place for what every parser of the user's files checks (the target and
standard-field descriptions, setups files, measurement tables): opening a file
with every OS failure as one :class:`~varstar.errors.InputError`, a size cap
and UTF-8 decoding, TOML nesting and huge integers refused with the key, the one
numeric check (:func:`finite_number`) and the one rule for star, band and frame
ids (:func:`id_problem`).  Imports nothing of varstar but its errors.
"""

from __future__ import annotations

import math
import re
from pathlib import Path
from typing import Any, BinaryIO, Mapping

from .errors import InputError

try:  # Python 3.11+
    import tomllib
except ModuleNotFoundError:  # pragma: no cover - Python 3.10
    import tomli as tomllib  # type: ignore[no-redef]


#: Deepest nesting a varstar TOML file may have.  A target needs 3 levels (``[[stars]]`` -> one
#: star's table -> a value; ``[reduction] exclude = [...]``), a setups file 2 (``[setups.NAME]``);
#: 16 leaves room for tables of one's own while a value nested hundreds deep (which
#: recursive readers cannot follow) is refused with a message (our choice).
MAX_TOML_DEPTH = 16

#: Characters no id or name may contain: the Unicode general categories Cc (control
#: characters: NUL, tab, line ends, DEL, the C1 set), Zl and Zp (the line and paragraph
#: separators, which split a line in editors and terminals).  Cc is exactly U+0000-U+001F
#: and U+007F-U+009F, Zl is U+2028 and Zp U+2029 (Unicode Standard, section 4.5 "General
#: Category", from memory; ``tests/test_input_adversarial.py`` checks the pattern against
#: Python's :mod:`unicodedata`).  Which categories to refuse is our choice.  The one rule
#: for every id (star, band, frame) and for the target's name.
_NOT_IN_TEXT = re.compile("[\x00-\x1f\x7f-\x9f\u2028\u2029]")


def _finite(v: Any) -> bool:
    """True for a TOML number (not a boolean) that is a finite float.

    TOML integers may be larger than any float; ``math.isfinite`` would raise
    OverflowError on them.
    """
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        return False
    try:
        return math.isfinite(float(v))
    except OverflowError:
        return False


def shown(v: Any) -> str:
    """A value for a message: short, and an integer too large for a float by its length."""
    if isinstance(v, int) and not isinstance(v, bool) and not _finite(v):
        try:
            digits = f"{len(str(abs(v)))} digits"
        except ValueError:  # beyond Python's limit for turning integers into text
            digits = "thousands of digits"
        return f"an integer of {digits} (too large for a number)"
    text = repr(v)
    return text if len(text) <= 60 else text[:57] + "..."


def finite_number(value: Any, where: str) -> float:
    """The one check of every numeric value of a TOML file (target, setups, coefficients).

    Parameters
    ----------
    value
        The value as :mod:`tomllib` returned it.
    where
        The file and key, e.g. ``"t.toml: [site].latitude"``; the message starts with it.

    Returns
    -------
    float
        The value as a finite float.

    Raises
    ------
    InputError
        For a boolean, text, array or table, NaN or infinity, and an integer too
        large for a float (TOML integers have no size limit; ``float()`` and
        ``math.isfinite`` raise OverflowError on them).
    """
    if not _finite(value):
        raise InputError(f"{where}: expected a finite number, got {shown(value)}")
    return float(value)


def printable(text: str) -> bool:
    """No control character, line or paragraph separator (see :data:`_NOT_IN_TEXT`)."""
    return _NOT_IN_TEXT.search(text) is None


def id_problem(text: str) -> str | None:
    """Why ``text`` cannot be an id, or None: the one rule for star, band and frame ids.

    An id is text that is not empty after removing surrounding blanks and holds
    no control character (tab, line end, NUL, ...) and no line or paragraph
    separator: such a character cannot be stored in the archive (NUL) or would
    split or hide part of a message, a table row or a file name.
    """
    if not text.strip():
        return "is empty"
    bad = _NOT_IN_TEXT.search(text)
    if bad:
        return f"contains U+{ord(bad.group()):04X}, a control character or line separator; use printable text"
    return None


def _step(label: str, key: str | int, value: Any, top: bool) -> str:
    """The label of ``value``, found under ``key`` of the container labelled ``label``.

    Key paths read like the file: ``[transformation].epsilon_v``, ``[setups.garden].mu_bv``,
    ``[stars] #2 (id 'C1').V``.
    """
    if isinstance(key, int):
        ident = value.get("id") if isinstance(value, dict) else None
        return f"{label} #{key + 1}" + (f" (id {shown(ident)})" if isinstance(ident, str) else "")
    if top:
        return f"[{key}]"
    if isinstance(value, dict) and label.startswith("[") and label.endswith("]"):
        return f"{label[:-1]}.{key}]"  # a table inside a table: [setups.garden]
    return f"{label}.{key}"


def _label_of(link: tuple | None) -> str:
    """The key path of a value from its chain of ``(parent link, key, value)`` (built only for a message)."""
    steps = []
    while link is not None:
        link, key, value = link
        steps.append((key, value))
    label = ""
    for depth, (key, value) in enumerate(reversed(steps)):
        label = _step(label, key, value, depth == 0)
    return label or "the top level"


def check_toml_document(doc: Mapping[str, Any], source: str) -> None:
    """Refuse what no varstar TOML file holds, anywhere in it: deep nesting, unrepresentable numbers.

    Walks the document without recursion, looking once at every value.  Every
    table and array deeper than :data:`MAX_TOML_DEPTH` and every integer a
    float cannot hold is refused, naming the key, so that no later reader (of
    ``[ephemeris]``, ``[reduction]`` or tables of one's own) meets them.  NaN
    and infinity are left to the checks of the keys that use the values
    (:func:`finite_number`).
    """
    stack: list[tuple[Any, tuple | None, int]] = [(doc, None, 0)]
    while stack:
        node, link, depth = stack.pop()
        for key, value in (node.items() if isinstance(node, dict) else enumerate(node)):
            kind = type(value)
            if kind is dict or kind is list:
                if depth + 1 > MAX_TOML_DEPTH:
                    raise InputError(
                        f"{source}: {_label_of((link, key, value))}: tables or arrays nested more than "
                        f"{MAX_TOML_DEPTH} levels deep; a varstar file needs at most 3 levels"
                    )
                stack.append((value, (link, key, value), depth + 1))
            elif kind is int and value.bit_length() > 1023 and not _finite(value):  # below 2**1023 a float holds it
                raise InputError(f"{source}: {_label_of((link, key, value))}: expected a finite number, got {shown(value)}")


def load_toml(text: str, source: str) -> dict[str, Any]:
    """Parse TOML text into a document, every failure as an :class:`InputError` naming ``source``.

    Used for every TOML file varstar reads (target, standard field, setups,
    coefficients), followed by :func:`check_toml_document`.
    """
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{source}: not valid TOML: {exc}") from None
    except ValueError:  # Python refuses integers of over 4300 digits (its documentation: "Integer string
        # conversion length limitation"; sys.int_info.default_max_str_digits)
        raise InputError(f"{source}: a number has thousands of digits (too large for any value here)") from None
    except RecursionError:  # tomllib reads nested arrays and inline tables recursively
        raise InputError(
            f"{source}: arrays or inline tables nested too deeply to read (hundreds of levels); "
            f"a varstar file needs at most 3 levels"
        ) from None
    check_toml_document(doc, source)
    return doc


#: Largest TOML file read: a target of 70,000 stars is about 3 MB, so this leaves
#: room while a device or a wrong file cannot fill the memory (our choice).
MAX_TOML_BYTES = 64 * 2**20


def open_input(path: Path, what: str) -> BinaryIO:
    """Open an input file for reading in binary, every usual OS failure as one :class:`InputError`.

    ``what`` names what the file should be, for the message about a directory
    (``"a TOML file"``, ``"a measurement table"``).
    """
    try:
        return open(path, "rb")
    except FileNotFoundError:
        raise InputError(f"{path}: file not found") from None
    except IsADirectoryError:
        raise InputError(f"{path}: is a directory, not {what}") from None
    except OSError as exc:
        raise InputError(f"{path}: cannot read: {exc.strerror}") from None
    except ValueError:  # a NUL in a file name (e.g. given inside a TOML file: setups = "...")
        raise InputError(f"{str(path)!r}: not a usable file name (it contains a NUL character)") from None


def read_toml_text(p: Path) -> str:
    """The text of a TOML file (target, standard field, setups), every failure as an :class:`InputError`.

    At most :data:`MAX_TOML_BYTES` are read, so that a wrong path (a device, a
    huge file) costs little.
    """
    with open_input(p, "a TOML file") as fh:
        try:
            raw = fh.read(MAX_TOML_BYTES + 1)
        except OSError as exc:
            raise InputError(f"{p}: cannot read: {exc.strerror}") from None
    if len(raw) > MAX_TOML_BYTES:
        raise InputError(f"{p}: larger than {MAX_TOML_BYTES // 2**20} MiB; not a varstar TOML file")
    try:
        return raw.decode("utf-8-sig")  # a byte-order mark, as some editors write, is not part of the text
    except UnicodeDecodeError as exc:
        raise InputError(f"{p}: not UTF-8 text (byte {exc.start})") from None
