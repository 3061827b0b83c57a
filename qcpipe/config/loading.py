"""Reading TOML configuration files and turning validation errors into one line.

Every message names the file, the key (dotted path, list items as
``[i]`` or by their ``id``), what is wrong and how to fix it.
"""

from __future__ import annotations

import hashlib
import json
import re
import tomllib
import typing
from pathlib import Path
from typing import Annotated, Any, TypeVar

import pydantic

from ..errors import ConfigError

M = TypeVar("M", bound=pydantic.BaseModel)

#: identifiers used in file names: letters, digits, '-', '_' and '.', not starting with '.'
SAFE_ID = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.\-]{0,63}$")


def check_safe_id(value: str, what: str) -> str:
    """Reject identifiers that could escape the archive when used in a path."""
    # fullmatch: ``$`` in SAFE_ID would also match before a trailing newline
    if not isinstance(value, str) or not SAFE_ID.fullmatch(value) or ".." in value:
        raise ValueError(
            f"{what} {value!r} is not a safe identifier; use 1-64 letters, digits, "
            "'-', '_' or '.', starting with a letter or digit (no '/', '..' or spaces)")
    return value


def safe_id(what: str):
    """A pydantic string type holding a safe identifier (:func:`check_safe_id`); ``what`` names it in errors.

    The one definition of identifier validation: ``id: safe_id("station id")``.
    """
    return Annotated[str, pydantic.AfterValidator(lambda v: check_safe_id(v, what))]


SiteId, StationId, Serial, DeploymentId = (safe_id("site id"), safe_id("station id"), safe_id("instrument serial"),
                                           safe_id("deployment id"))


def read_toml(path: Path) -> dict[str, Any]:
    """Parse a TOML file; syntax errors become a ConfigError naming file and line."""
    path = Path(path)
    try:
        text = path.read_bytes().decode("utf-8")
    except FileNotFoundError:
        raise ConfigError(f"{path}: file not found; check the path") from None
    except UnicodeDecodeError as err:
        raise ConfigError(f"{path}: not UTF-8 text (byte {err.start}); save the file as UTF-8") from None
    except OSError as err:
        raise ConfigError(f"{path}: cannot read ({err.strerror}); check the path and its permissions") from None
    except ValueError as err:                 # e.g. a NUL character in the path
        raise ConfigError(f"{shown(str(path))}: cannot read ({err}); check the path") from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise ConfigError(f"{path}: TOML syntax error: {err}; fix the line it names") from None


def shown(text: str) -> str:
    """``text`` with control and other non-printable characters escaped, so a message stays one line."""
    return "".join(c if c.isprintable() else repr(c)[1:-1] for c in str(text))


def shown_key(key: Any) -> str:
    """A TOML key as it appears in a dotted key path: quoted when it is empty or holds odd characters."""
    key = str(key)
    if key and key.isprintable() and not any(c in key for c in ". '\"[]"):
        return key
    return shown(repr(key))


def _key_path(loc: tuple, data: Any) -> str:
    parts: list[str] = []
    node = data
    for item in loc:
        if isinstance(item, int):
            label = f"[{item}]"
            try:
                entry = node[item]
                field = next((k for k in ("id", "serial", "name") if isinstance(entry, dict) and entry.get(k)), None)
                if field:
                    label = f"[{item}] ({'name' if field == 'name' else 'id'} {shown(repr(entry[field]))})"
                node = entry
            except (IndexError, KeyError, TypeError, AttributeError):
                node = None
            parts.append(label)
        else:
            parts.append(("." if parts else "") + shown_key(item))
            try:
                node = node[item]
            except (KeyError, TypeError, IndexError):
                node = None
    return "".join(parts) or "(top level)"


def _hint(err: dict) -> str:
    kind = err.get("type", "")
    if kind == "missing":
        return "add this key"
    if kind == "extra_forbidden":
        return "remove it or check its spelling"
    return "correct the value"


def validate(model: type[M], data: dict[str, Any], path: Path) -> M:
    """Validate ``data`` against ``model``; raise one ConfigError naming file and key."""
    try:
        return model.model_validate(data)
    except pydantic.ValidationError as exc:
        errs = exc.errors(include_url=False)
        # an unknown key is most often a misspelt one, which also makes its right spelling "missing":
        # name the unknown key first, with the keys its table takes
        errs.sort(key=lambda e: e.get("type") != "extra_forbidden")
        first = errs[0]
        key = _key_path(tuple(first["loc"]), data)
        expected = _keys_at(model, tuple(first["loc"])[:-1]) if first.get("type") == "extra_forbidden" else None
        if expected:
            table = tuple(first["loc"])[:-1]
            missing = [shown_key(e["loc"][-1]) for e in errs if e.get("type") == "missing"
                       and tuple(e["loc"])[:-1] == table]
            absent = f" ({', '.join(missing)} missing)" if missing else ""
            raise ConfigError(f"{path}: key {key}: unknown key; this table takes {', '.join(expected)}{absent}; "
                              f"{_hint(first)}") from None
        msg = shown(first["msg"].removeprefix("Value error, "))
        more = f" (and {len(errs) - 1} more problem{'s' if len(errs) > 2 else ''})" if len(errs) > 1 else ""
        bad = ""
        if first.get("type") not in ("missing",) and "input" in first and not isinstance(first["input"], (dict, list)):
            bad = f" (got {shown(repr(first['input']))[:200]})"
        raise ConfigError(f"{path}: key {key}: {msg}{bad}; {_hint(first)}{more}") from None


def _keys_at(model: type[pydantic.BaseModel], loc: tuple) -> list[str] | None:
    """The keys the table at ``loc`` (a validation error's location) of ``model`` takes; None when the
    location does not lead through models' fields (a table of free names, say)."""
    node: Any = model
    for item in loc:
        if isinstance(item, int):
            continue                      # an item of a list: its model was taken from the list's type
        fields = getattr(node, "model_fields", None)
        if not fields or item not in fields:
            return None
        node = _model_in(fields[item].annotation)
    fields = getattr(node, "model_fields", None)
    return [f.alias or name for name, f in fields.items()] if fields else None


def _model_in(annotation: Any) -> type[pydantic.BaseModel] | None:
    """The model inside a field's type (``Spike | None``, ``list[Season]``), if there is one."""
    if isinstance(annotation, type) and issubclass(annotation, pydantic.BaseModel):
        return annotation
    for arg in typing.get_args(annotation):
        found = _model_in(arg)
        if found is not None:
            return found
    return None


def content_sha256(data: Any) -> str:
    """SHA-256 of a configuration's normalised content (sorted-key JSON).

    Comments, key order and whitespace do not change it; values do.
    """
    text = json.dumps(data, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def dumps_like(doc, original: str) -> str:
    """A tomlkit document as text, its new lines ending as the ``original`` file's did (CRLF kept)."""
    import tomlkit

    out = tomlkit.dumps(doc)
    return re.sub(r"(?<!\r)\n", "\r\n", out) if "\r\n" in original else out


def edited_toml_data(text: str, path, what: str) -> dict:
    """An edited file's ``text`` parsed for validation before it replaces ``path``; ConfigError (one line,
    saying the file was left unchanged) when the edit is not valid TOML. ``what``: "the edited register is"."""
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise ConfigError(f"{path}: {what} not valid TOML ({err}); the file was left unchanged") from None


def rewrite_validated(path, what: str, edit, validate_text, *, missing_is_empty: bool = False):
    """Replace the configuration file at ``path`` by ``edit(text)`` only if ``validate_text(new)`` accepts it.

    The file is read as UTF-8 (an absent one as "" with ``missing_is_empty``), edited, validated, then
    written atomically; returns what ``validate_text`` returned.  A file that cannot be read, or an edit
    that is not valid, is a one-line ConfigError and the file is left unchanged.  ``what``: "register",
    "annotations" (the file's words in the messages)."""
    from ..files import write_text_atomic

    path = Path(path)
    try:
        text = "" if missing_is_empty and not path.exists() else path.read_bytes().decode("utf-8")
    except (OSError, UnicodeDecodeError) as err:
        raise ConfigError(f"{path}: cannot read the {what} ({err}); check the path") from None
    new = edit(text)
    try:
        loaded = validate_text(new)
    except ConfigError as err:
        raise ConfigError(f"{err} (the {what} file was left unchanged)") from None
    write_text_atomic(path, new)
    return loaded
