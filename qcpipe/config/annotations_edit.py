"""Edits of the review annotations file that keep its comments and layout: add, replace, remove.

The file is parsed with tomlkit (a TOML library that keeps comments, blank lines, key order
and quoting), the ``[[annotation]]`` table is appended, replaced or removed, and the edited
text is validated with the annotations' own loader before it replaces the file atomically:
the file is either the old one or a valid new one, never anything else.  A missing file is
created with a short comment heading it.

An annotation is named by its *key*: the SHA-256 of its normalised content
(:meth:`Annotation.as_dict`), first 16 hex digits.  Editing by key, not by position, means
an edit aimed at an annotation that someone changed meanwhile finds nothing and says so.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json
from pathlib import Path

import tomlkit

from ..errors import ConfigError
from .annotations import Annotation, AnnotationFile, Annotations
from .loading import dumps_like, edited_toml_data, rewrite_validated, validate

HEADING = ("# Review annotations: a reviewer's flags over time ranges (format: qcpipe/config/annotations.py).\n"
           "# Written by hand or by 'qcpipe inspect'; comments and layout are kept.\n")


def annotation_key(a: Annotation) -> str:
    """The annotation's key: first 16 hex digits of the SHA-256 of its normalised content (JSON, sorted keys)."""
    return hashlib.sha256(json.dumps(a.as_dict(), sort_keys=True).encode()).hexdigest()[:16]


def _entry(a: Annotation) -> tomlkit.items.Table:
    """One ``[[annotation]]`` table, keys in the documented order, times as UTC offset date-times."""
    d = a.as_dict()
    t = tomlkit.table()
    t["station"] = d["station"]
    t["variables"] = d["variables"]
    t["start"] = tomlkit.item(a.start.astimezone(dt.timezone.utc))
    t["end"] = tomlkit.item(a.end.astimezone(dt.timezone.utc))
    t["flag"] = d["flag"]
    t["reason"] = d["reason"]
    t["reviewer"] = d["reviewer"]
    t["date"] = tomlkit.item(a.date)
    t.add(tomlkit.nl())                 # a blank line before whatever follows
    return t


def _parse(text: str, path: Path) -> tomlkit.TOMLDocument:
    try:
        return tomlkit.parse(text)
    except tomlkit.exceptions.ParseError as err:
        raise ConfigError(f"{path}: TOML syntax error: {err}; fix the line it names (the file was left "
                          "unchanged)") from None


def _position(doc, key: str, path: Path) -> int:
    items = doc.get("annotation", [])
    for i, t in enumerate(items):
        try:
            if annotation_key(Annotation.model_validate(t.unwrap() if hasattr(t, "unwrap") else t)) == key:
                return i
        except ValueError:
            continue
    raise ConfigError(f"{path}: no annotation with key {key!r} (it was changed or removed meanwhile); "
                      "reload the annotations and try again")


def edited_text(text: str, path: Path, *, add: Annotation | None = None, replace: str | None = None,
                remove: str | None = None) -> str:
    """The annotations ``text`` with ``add`` appended, or the annotation keyed ``replace`` replaced by
    ``add``, or the one keyed ``remove`` removed; the file's line ends (LF or CRLF) kept."""
    doc = _parse(text, path) if text.strip() else tomlkit.parse(HEADING)
    if "annotation" not in doc:
        doc["annotation"] = tomlkit.aot()
    aot = doc["annotation"]
    if not isinstance(aot, tomlkit.items.AoT):
        raise ConfigError(f"{path}: key annotation: expected [[annotation]] tables; edit the file by hand")
    if replace is not None or remove is not None:
        i = _position(doc, replace if replace is not None else remove, path)
        if replace is not None:
            aot[i] = _entry(add)
        else:
            del aot[i]
            if len(aot) == 0:
                del doc["annotation"]           # not "annotation = []": the file is as if never written to
    elif add is not None:
        aot.append(_entry(add))
    return dumps_like(doc, text)


def validated_annotations_text(text: str, path: Path) -> Annotations:
    """The annotations ``text`` (meant for ``path``) validated as :func:`load_annotations` does; ConfigError if not."""
    data = edited_toml_data(text, path, "the edited annotations are")
    return Annotations(validate(AnnotationFile, data, path).annotation, path)


def edit_annotations(path: str | Path, *, add: Annotation | None = None, replace: str | None = None,
                     remove: str | None = None) -> Annotations:
    """Edit the annotations file at ``path`` (see :func:`edited_text`), keeping its comments and layout.

    The edited text is validated first; on any error the file is unchanged and the
    ConfigError (one line) names file, key and what to do.  Returns the new annotations.
    """
    path = Path(path)
    if (add is None) == (remove is None) or (replace is not None and add is None):
        raise ValueError("give add=, add= with replace=, or remove= alone")
    return rewrite_validated(path, "annotations",
                             lambda text: edited_text(text, path, add=add, replace=replace, remove=remove),
                             lambda new: validated_annotations_text(new, path), missing_is_empty=True)
