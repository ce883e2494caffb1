"""A small declarative schema for study files: keys, types, defaults, checks."""

from __future__ import annotations

import difflib
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable

from ..errors import ConfigError

__all__ = ["Key", "REQUIRED", "Section", "validate_section", "close_match"]

REQUIRED = object()
_TYPE_NAMES = {bool: "true or false", int: "a whole number", float: "a number", str: "text", list: "a list"}


@dataclass(frozen=True)
class Key:
    """One setting.

    type : bool, int, float, str or list
    default : the value when absent; REQUIRED if it must be given; None if optional
    doc : one line for the reference
    choices : allowed values
    check : callable(value) -> error text or None
    path : "input" (a file that must exist), "output" (a folder), or None;
        paths are relative to the study file.
    unit : the unit of a number, for the reference
    example : a value to show in the reference's examples (default: the default)
    """

    type: type
    default: Any = None
    doc: str = ""
    choices: tuple | None = None
    check: Callable | None = None
    path: str | None = None
    unit: str = ""
    example: Any = None


@dataclass(frozen=True)
class Section:
    """A table of keys; ``exactly_one`` lists groups of keys of which exactly one must be set.

    ``check`` is an optional callable(resolved dict) -> error text or None for
    rules that involve several keys. ``renamed`` maps keys of earlier releases
    to their new names, so that an old study gets told the new key.
    """

    keys: dict
    doc: str = ""
    exactly_one: tuple = ()
    check: Callable | None = None
    renamed: dict | None = None


def close_match(name, options):
    """' Did you mean ...?' for a misspelt name, or an empty string."""
    match = difflib.get_close_matches(name, list(options), n=1, cutoff=0.6)
    return f" Did you mean '{match[0]}'?" if match else ""


def validate_section(raw, section, where, base_dir, source):
    """Check a TOML table against a Section; return the resolved dict (defaults filled in).

    ``where`` is the dotted table name for messages, ``source`` the file.
    """
    if not isinstance(raw, dict):
        raise ConfigError(f"{source}: [{where}] must be a table, got {_show(raw)}.")
    for name in raw:
        if name not in section.keys:
            new = (section.renamed or {}).get(name)
            if new is not None:
                raise ConfigError(f"{source}: the key '{name}' in [{where}] is now called '{new}'; rename it "
                                  "(docs/study-files.md lists every key).")
            raise ConfigError(f"{source}: unknown key '{name}' in [{where}].{close_match(name, section.keys)} "
                              f"Known keys: {', '.join(section.keys) or 'none'}.")
    out = {}
    for name, key in section.keys.items():
        label = f"{where}.{name}"
        if name not in raw:
            if key.default is REQUIRED:
                raise ConfigError(f"{source}: [{where}] needs the key '{name}' ({key.doc}).")
            out[name] = key.default
            continue
        out[name] = _check_value(raw[name], key, label, base_dir, source)
    for group in section.exactly_one:
        given = [k for k in group if out.get(k) is not None]
        if len(given) != 1:
            got = "none of them" if not given else " and ".join(given)
            options = ", ".join(group[:-1]) + " or " + group[-1]
            raise ConfigError(f"{source}: [{where}] needs exactly one of {options}; got {got}.")
    if section.check is not None:
        problem = section.check(out)
        if problem:
            raise ConfigError(f"{source}: [{where}] {problem}.")
    return out


def _check_value(value, key, label, base_dir, source):
    expected = key.type
    ok = isinstance(value, expected) and not (expected in (int, float) and isinstance(value, bool))
    if expected is float and isinstance(value, int) and not isinstance(value, bool):
        value, ok = float(value), True
    if not ok:
        raise ConfigError(f"{source}: '{label}' must be {_TYPE_NAMES.get(expected, expected.__name__)}, "
                          f"got {_show(value)}.")
    if expected is float and not math.isfinite(value):
        raise ConfigError(f"{source}: '{label}' must be a finite number, got {value!r}. Give a number such as "
                          f"{key.default if isinstance(key.default, float) else 1.0!r}.")
    if key.choices is not None and value not in key.choices:
        raise ConfigError(f"{source}: '{label}' must be one of {', '.join(map(repr, key.choices))}; "
                          f"got {value!r}.{close_match(str(value), map(str, key.choices))}")
    if key.check is not None:
        problem = key.check(value)
        if problem:
            raise ConfigError(f"{source}: '{label}' = {value!r}: {problem}.")
    if key.path:
        path = Path(value)
        value = path if path.is_absolute() else (base_dir / path)
        if key.path == "input" and not value.exists():
            raise ConfigError(f"{source}: '{label}' names '{path}', which does not exist "
                              f"(looked for {value}). Paths are relative to the study file.")
        if key.path == "input" and not value.is_file():
            kind = "a folder" if value.is_dir() else "not a regular file (a device, pipe or socket)"
            raise ConfigError(f"{source}: '{label}' names '{path}', which is {kind}. Give the path of a "
                              "file.")
    return value


def _show(value):
    return f"{type(value).__name__} {value!r}"
