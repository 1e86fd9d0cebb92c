"""Reading TOML input files and checking their tables against a schema (study and scenario files).

A schema maps each allowed key to ``(type or types, required)``, the Python types TOML values parse to. Every
problem raises a one-line :class:`coverkit.errors.StudyError` naming the file and the key: unknown key (with the
allowed ones), wrong type (with what was given), missing required key.
"""

from __future__ import annotations

import tomllib
from collections.abc import Iterable
from pathlib import Path
from typing import Any

from coverkit.errors import StudyError

#: key -> (accepted type or types, required)
Schema = dict[str, tuple[type | tuple[type, ...], bool]]

_TYPE_WORDS = {
    "str": "a string",
    "list": "a list",
    "int": "a whole number",
    "float": "a number",
    "bool": "true/false",
    "dict": "a table",
}


def _types(types: type | tuple[type, ...]) -> tuple[type, ...]:
    return types if isinstance(types, tuple) else (types,)


def type_name(types: type | tuple[type, ...]) -> str:
    """Plain words for the accepted types, e.g. ``"a string or a list"`` (int and float read as one number)."""
    ts = _types(types)
    if float in ts:  # a float key takes whole numbers too: say "a number" once
        ts = tuple(t for t in ts if t is not int)
    return " or ".join(dict.fromkeys(_TYPE_WORDS.get(t.__name__, t.__name__) for t in ts))


def read_toml(path: str | Path, what: str, missing_hint: str) -> tuple[Path, dict[str, Any]]:
    """Read a UTF-8 TOML file: (resolved path, parsed tables).

    ``what`` names the file kind in messages (``"study"``, ``"scenario"``); ``missing_hint`` ends the message for a
    missing file.
    """
    path = Path(path).resolve()
    if not path.is_file():
        raise StudyError(f"{what} file {path} not found; {missing_hint}")
    try:
        raw = tomllib.loads(path.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as exc:
        raise StudyError(f"{path}: not valid TOML ({exc}); fix the syntax.") from None
    except UnicodeDecodeError:
        raise StudyError(f"{path}: not a UTF-8 text file; save the {what} as UTF-8 TOML.") from None
    return path, raw


def check_sections(raw: dict[str, Any], sections: Iterable[str], where: str) -> None:
    """Every top-level section of ``raw`` must be one of ``sections``."""
    allowed = list(sections)
    for section in raw:
        if section not in allowed:
            raise StudyError(f"{where}: unknown section [{section}]; sections are {', '.join(allowed)}.")


def check_table(table: Any, schema: Schema, key_prefix: str, where: str, label: str | None = None) -> None:
    """Check one table's keys against ``schema``.

    Parameters
    ----------
    table
        The parsed value (must be a table).
    schema
        Allowed keys: ``{key: (type or types, required)}``.
    key_prefix
        Dotted prefix of the keys in messages (``"roads"``, ``"closure[0]"``).
    where
        The file, first in every message.
    label
        How the table is named in messages (default ``'<key_prefix>'``; a study section passes ``[roads]``).
    """
    label = label or f"'{key_prefix}'"
    if not isinstance(table, dict):
        raise StudyError(f"{where}: {label} must be a table of keys.")
    for key, value in table.items():
        if key not in schema:
            raise StudyError(
                f"{where}: unknown key '{key_prefix}.{key}'; allowed keys in {label}: {', '.join(schema)}."
            )
        types = _types(schema[key][0])
        # TOML true/false parse to bool, a subclass of int: accept them only where bool is allowed
        if not isinstance(value, types) or (isinstance(value, bool) and bool not in types):
            got = "true/false" if isinstance(value, bool) else f"{type(value).__name__} {value!r}"
            raise StudyError(f"{where}: key '{key_prefix}.{key}' must be {type_name(types)}, got {got}.")
    for key, (_, required) in schema.items():
        if required and key not in table:
            raise StudyError(f"{where}: {label} is missing the required key '{key}'.")


__all__ = ["Schema", "check_sections", "check_table", "read_toml", "type_name"]
