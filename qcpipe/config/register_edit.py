"""Edits of the station register that keep its comments and layout: confirmed clock corrections.

The file is parsed with tomlkit (a TOML library that keeps comments, blank lines, key order
and quoting), the deployments' ``clock_correction`` tables are set, and the edited text is
validated with the register's own loader before it replaces the file atomically: the file is
either the old one or a valid new one, never anything else.
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import tomlkit

from ..errors import ConfigError
from .loading import content_sha256, dumps_like, edited_toml_data, rewrite_validated, validate
from .register import LoadedRegister, Register


def correction_entry(*, shift_s: float, confirmed_by: str, confirmed_on: dt.date, verdict: str,
                     evidence: str) -> dict:
    """A deployment's ``clock_correction`` table as a dict (keys in the order they are written)."""
    return {"shift_s": float(shift_s), "confirmed_by": confirmed_by, "confirmed_on": confirmed_on,
            "verdict": verdict, "evidence": evidence}


def _set_last(table, key: str, value) -> None:
    """Set ``key`` in a tomlkit table: in place when present, else after its last key (before comments
    that follow the table, which belong to what comes next in the file)."""
    if key in table:
        table[key] = value
        return
    body = table.value.body
    last = max((i for i, (k, _) in enumerate(body) if k is not None), default=-1)
    insert = getattr(table.value, "_insert_at", None)      # tomlkit has no public insert at a position
    if last == len(body) - 1 or insert is None:
        table[key] = value
    else:
        insert(last + 1, key, value)


def with_clock_corrections(text: str, corrections: dict[str, dict], *, path: Path) -> str:
    """The register text ``text`` with a ``clock_correction`` table set on each deployment of ``corrections``.

    Only those lines change: each table is written as one inline table after the
    deployment's last key (replacing an earlier correction in place), with the file's
    line ends (LF or CRLF).  ConfigError
    (one line) when a deployment is not a ``[[deployment]]`` table of the file.
    """
    try:
        doc = tomlkit.parse(text)
    except tomlkit.exceptions.ParseError as err:
        raise ConfigError(f"{path}: TOML syntax error: {err}; fix the line it names") from None
    tables = {str(t.get("id")): t for t in doc.get("deployment", [])}
    for dep_id, entry in corrections.items():
        table = tables.get(dep_id)
        if table is None or not hasattr(table, "value"):
            raise ConfigError(f"{path}: key deployment: no [[deployment]] table with id {dep_id!r} to correct; "
                              "write its clock_correction by hand")
        inline = tomlkit.inline_table()
        inline.update(entry)
        _set_last(table, "clock_correction", inline)
    return dumps_like(doc, text)


def validated_register_text(text: str, path: Path) -> LoadedRegister:
    """The register ``text`` (meant for ``path``) validated as :func:`load_register` does; ConfigError if not."""
    data = edited_toml_data(text, path, "the edited register is")
    return LoadedRegister(validate(Register, data, path), path, content_sha256(data))


def write_clock_corrections(path: str | Path, corrections: dict[str, dict]) -> LoadedRegister:
    """Write ``corrections`` into the register file at ``path``, keeping its comments and layout.

    The edited text is validated first; on any error the file is unchanged and the
    ConfigError names file, key and what to do.  Returns the new register.
    """
    path = Path(path)
    return rewrite_validated(path, "register", lambda text: with_clock_corrections(text, corrections, path=path),
                             lambda new: validated_register_text(new, path))


def check_clock_corrections(path: str | Path, corrections: dict[str, dict]) -> None:
    """ConfigError (one line) if writing ``corrections`` into the register at ``path`` would make it invalid."""
    path = Path(path)
    validated_register_text(with_clock_corrections(path.read_text(encoding="utf-8"), corrections, path=path), path)
