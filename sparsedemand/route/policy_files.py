"""Policy files (TOML) and per-item override files (CSV), with the line at fault in every error.

Examples
--------
>>> policy = load_policy("policy.toml")  # doctest: +SKIP
>>> policy["lumpy"].method  # doctest: +SKIP
'tsb'
"""

from __future__ import annotations

import csv
from io import StringIO
import os
import re
import tomllib
from pathlib import Path
from typing import Mapping

from ..errors import InputError
from ..io import _first_line
from ._checks import _caller_rules, _check_rule
from .rules import DEFAULT_POLICY, Rule, _row_names

__all__ = ["load_policy", "load_overrides"]


def _read_text(path, what: str) -> str:
    name = str(path)
    try:
        return Path(path).read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise InputError(f"{name}: no such {what}") from None
    except IsADirectoryError:
        raise InputError(f"{name}: is a folder, not a {what}") from None
    except UnicodeDecodeError as exc:
        raise InputError(f"{name}: not UTF-8 text (byte {exc.start})") from None
    except OSError as exc:
        raise InputError(f"{name}: cannot read the {what} ({exc.strerror or exc})") from None


_TOML_POSITION = re.compile(r"\s*\(at line (\d+), column (\d+)\)\s*$")
_TOML_KEY = re.compile(r'^\s*"?([A-Za-z0-9_-]+)"?\s*=')


def _toml_lines(lines: list[str], pattern: str) -> tuple[int, dict[str, int]]:
    """Line of ``pattern``'s row and of each of its keys (1-based), for messages."""
    name = rf'"?{re.escape(pattern)}"?'
    header = re.compile(rf"^\s*\[\s*patterns\s*\.\s*{name}\s*\]")
    for n, line in enumerate(lines):
        if header.match(line):
            keys: dict[str, int] = {}
            for m in range(n + 1, len(lines)):
                if lines[m].lstrip().startswith("["):
                    break
                found = _TOML_KEY.match(lines[m])
                if found:
                    keys.setdefault(found.group(1), m + 1)
            return n + 1, keys
    # inline table (lumpy = { ... }) or dotted keys (patterns.lumpy.method = ...)
    other = re.compile(rf"^\s*(?:patterns\s*\.\s*)?{name}\s*[.=]")
    first, keys = 0, {}
    for n, line in enumerate(lines):
        if other.match(line):
            first = first or n + 1
            rest = line.split(pattern, 1)[1]
            for key in re.findall(r'"?([A-Za-z0-9_-]+)"?\s*=', rest):
                keys.setdefault(key, n + 1)
    return first or 1, keys


def _section_line(lines: list[str], key: str) -> int:
    found = re.compile(rf'^\s*\[?\s*"?{re.escape(key)}"?\s*[\].=]')
    return next((n + 1 for n, line in enumerate(lines) if found.match(line)), 1)


def load_policy(path: str | os.PathLike, *, base: Mapping[str, Rule] | None = None) -> dict[str, Rule]:
    """Read a TOML policy file; its rows replace rows of ``base`` (the default table).

    Each row is a table ``[patterns.NAME]`` (NAME a pattern or status) with a
    ``method`` and any fixed parameters; a smoothing constant left out is
    optimised. Every error names the file and the line at fault.

    Examples
    --------
    >>> policy = load_policy("policy.toml")  # doctest: +SKIP
    >>> policy["lumpy"].method  # doctest: +SKIP
    'tsb'
    """
    name = str(path)
    text = _read_text(path, "policy file")
    lines = text.splitlines()
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        message = _first_line(exc)
        at = _TOML_POSITION.search(message)
        if at:
            raise InputError(f"{name}, line {at.group(1)}: not valid TOML: "
                             f"{message[:at.start()]} (column {at.group(2)})") from None
        raise InputError(f"{name}: not valid TOML: {message}") from None
    policy = dict(base if base is not None else DEFAULT_POLICY)
    for key in data:
        if key != "patterns":
            line = _section_line(lines, key)
            raise InputError(f"{name}, line {line}: unknown section {key!r} (expected [patterns.NAME])")
    rows = data.get("patterns", {})
    if not isinstance(rows, dict):
        line = _section_line(lines, "patterns")
        raise InputError(f"{name}, line {line}: 'patterns' must hold tables [patterns.NAME]")
    known = _row_names()
    for pattern, row in rows.items():
        line, key_lines = _toml_lines(lines, pattern)
        where = f"{name}, line {line}"
        if pattern not in known:
            raise InputError(f"{where}: unknown pattern {pattern!r} (known: {', '.join(known)})")
        if not isinstance(row, dict) or "method" not in row:
            raise InputError(f"{where}: [patterns.{pattern}] needs a method = \"...\" entry")
        method = row["method"]
        if not isinstance(method, str):
            where_method = f"{name}, line {key_lines.get('method', line)}"
            raise InputError(f"{where_method}: method must be a name in quotes, got {method!r}")
        params = {k: v for k, v in row.items() if k != "method"}
        rule = Rule(method.strip(), params, source=f"policy file {name}, line {line}")
        _check_rule(rule, f"{name}, line {key_lines.get('method', line)}",
                    lambda key: f"{name}, line {key_lines.get(key, line)}")
        policy[pattern] = rule
    return policy


def load_overrides(path: str | os.PathLike, *, item_column: str = "item") -> dict[str, Rule]:
    """Read a per-item override CSV: ``item``, ``method`` and parameter columns.

    A blank parameter cell means "optimise"; blank lines are skipped. Line
    numbers in messages are those of the file (the header is line 1). Whether
    every item exists is checked against the input by :func:`assign_methods`.

    Examples
    --------
    >>> rules = load_overrides("overrides.csv")  # doctest: +SKIP
    >>> rules["NOR-BLT0001"].method  # doctest: +SKIP
    'tsb'
    """
    name = str(path)
    records = _csv_records(_read_text(path, "override file"), name)
    if not records:
        raise InputError(f"{name}: the file is empty")
    _, header = records[0]
    header = [cell.strip() for cell in header]
    seen = set()
    for column in header:
        if column in seen:
            raise InputError(f"{name}, line {records[0][0]}: column {column!r} appears twice")
        seen.add(column)
    for column in (item_column, "method"):
        if column not in header:
            found = ", ".join(header)
            raise InputError(f"{name}: missing column {column!r} (columns found: {found})")
    params_cols = [c for c in header if c not in (item_column, "method")]
    rules: dict[str, Rule] = {}
    lines: dict[str, int] = {}
    checked: set = set()
    for line, cells in records[1:]:
        where = f"{name}, line {line}"
        if len(cells) != len(header):
            raise InputError(f"{where}: {len(cells)} cells where the header has {len(header)}")
        rec = {column: cell.strip() for column, cell in zip(header, cells)}
        item = rec[item_column]
        if not item:
            raise InputError(f"{where}: empty {item_column}")
        if item in rules:
            raise InputError(f"{where}: item {item!r} is overridden twice (first on line {lines[item]})")
        params = {}
        for col in params_cols:
            if rec[col]:
                params[col] = _parse_value(rec[col], f"{where}, column {col!r}")
        rule = Rule(rec["method"], params, source=f"override file {name}, line {line}")
        _check_rule(rule, f"{where}, column 'method'", lambda key: f"{where}, column {key!r}", checked)
        rules[item] = rule
        lines[item] = line
    return rules


def _csv_records(text: str, name: str) -> list[tuple[int, list[str]]]:
    """Non-blank CSV records with the file line each starts on."""
    reader = csv.reader(StringIO(text, newline=""), strict=True)
    records = []
    line = 1
    try:
        for cells in reader:
            if any(cell.strip() for cell in cells):
                records.append((line, cells))
            line = reader.line_num + 1
    except csv.Error as exc:
        raise InputError(f"{name}, line {reader.line_num}: cannot read the CSV ({_first_line(exc)})") from None
    return records


def _parse_value(text: str, where: str):
    for cast in (int, float):
        try:
            return cast(text)
        except ValueError:
            pass
    low = text.lower()
    if low in ("true", "false"):
        return low == "true"
    if re.fullmatch(r"[A-Za-z_][A-Za-z0-9_-]*", text):
        return text
    raise InputError(f"{where}: cannot read parameter value {text!r}")


def _resolve_policy(policy) -> dict[str, Rule]:
    """The full routing table: the defaults with the given rows (a mapping or a TOML file) over them."""
    if policy is None:
        return dict(DEFAULT_POLICY)
    if isinstance(policy, (str, os.PathLike)):
        return load_policy(policy)
    if not isinstance(policy, Mapping):
        raise InputError(f"policy must be a mapping of pattern to Rule or a TOML file, got {type(policy).__name__}")
    known = _row_names()
    for pattern in policy:
        if pattern not in known:
            raise InputError(f"policy: unknown pattern {pattern!r} (known: {', '.join(known)})")
    return {**DEFAULT_POLICY, **_caller_rules(policy, "policy row", repr)}


def _resolve_overrides(overrides) -> dict:
    if overrides is None:
        return {}
    if isinstance(overrides, (str, os.PathLike)):
        return load_overrides(overrides)
    if not isinstance(overrides, Mapping):
        raise InputError(f"overrides must be a mapping of item to Rule or a CSV file, got {type(overrides).__name__}")
    return _caller_rules(overrides, "override for item", repr)
