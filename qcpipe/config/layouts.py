"""Logger layouts: how a raw file of one logger type is read.

File format (TOML, our own)::

    [layout.<name>]
    description = "..."
    file_glob = "*.csv"            # which file names this layout reads
    delimiter = ","                # one character; "\\t" for tab
    header_lines = 4               # metadata lines before the column-name row
    column_names = true            # a row of column names follows the header lines
    decimal = "."
    missing = ["", "NaN"]          # texts that mean no value
    time = { columns = ["date", "time"], format = "%d.%m.%Y %H:%M:%S" }
    serial = { source = "header", pattern = "^# unit (\\S+)" }   # or source = "filename"
    [layout.<name>.variables]
    temperature = { column = "temp", units = "degC" }

Columns are named (with ``column_names = true``) or 0-based numbers.
Several time columns are joined with one space before ``format`` is applied.
"""

from __future__ import annotations

import codecs
import datetime as dt
import fnmatch
import re
from pathlib import Path
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, field_validator, model_validator

from ..units import KNOWN_RAW_UNITS
from ._load import check_safe_id, content_sha256, read_toml, validate

#: variables a layout can map columns to, by instrument kind
VARIABLES_BY_KIND = {
    "immersion_probe": {"probe_reading"},
    "temperature": {"temperature"},
    "ph": {"ph", "ph_mv", "temperature"},
    "conductivity": {"conductivity", "temperature"},
    "pressure": {"pressure", "temperature"},
    "barometer": {"air_pressure", "temperature"},
}
KNOWN_VARIABLES = set().union(*VARIABLES_BY_KIND.values())


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, allow_inf_nan=False)


def _column_number(v):
    if isinstance(v, int) and v < 0:
        raise ValueError(f"column numbers count from 0, got {v}")
    return v


class TimeSpec(_Strict):
    columns: list[str | int] = Field(min_length=1)
    format: str

    @field_validator("format")
    @classmethod
    def _has_directives(cls, v: str) -> str:
        if "%" not in v:
            raise ValueError("time format needs strftime directives such as '%Y-%m-%d %H:%M:%S'")
        sample = dt.datetime(2026, 10, 5, 13, 24, 57)
        try:
            dt.datetime.strptime(sample.strftime(v), v)
        except ValueError as err:
            raise ValueError(f"time format {v!r} cannot be read back ({err}); use strftime directives "
                             "such as '%Y-%m-%d %H:%M:%S'") from None
        return v

    @field_validator("columns")
    @classmethod
    def _numbers(cls, v: list) -> list:
        return [_column_number(c) for c in v]


class SerialSpec(_Strict):
    source: Literal["header", "filename"]
    pattern: str = Field(description="regular expression with one group capturing the serial")

    @field_validator("pattern")
    @classmethod
    def _regex(cls, v: str) -> str:
        try:
            rx = re.compile(v)
        except re.error as err:
            raise ValueError(f"pattern is not a valid regular expression ({err})") from None
        if rx.groups < 1:
            raise ValueError("pattern needs one (group) capturing the serial number")
        return v


class VariableSpec(_Strict):
    column: str | int
    units: str

    _c = field_validator("column")(classmethod(lambda cls, v: _column_number(v)))

    @field_validator("units")
    @classmethod
    def _units(cls, v: str) -> str:
        if v not in KNOWN_RAW_UNITS:
            raise ValueError(f"unknown raw unit {v!r}; use one of {', '.join(KNOWN_RAW_UNITS)}")
        return v


class Layout(_Strict):
    description: str = ""
    file_glob: str = "*"
    encoding: str = "utf-8"
    delimiter: str = ","
    header_lines: int = Field(0, ge=0, le=200)
    column_names: bool = True
    decimal: Literal[".", ","] = "."
    missing: list[str] = ["", "NaN", "nan", "NA"]
    time: TimeSpec
    serial: SerialSpec
    variables: dict[str, VariableSpec] = Field(min_length=1)

    @field_validator("delimiter")
    @classmethod
    def _delim(cls, v: str) -> str:
        if v == "\\t":
            v = "\t"
        if len(v) != 1:
            raise ValueError("delimiter must be one character (write \"\\t\" for tab)")
        if v != "\t" and not v.isprintable() or v.isalnum():
            raise ValueError(f"delimiter {v!r} cannot separate fields; use a printable mark such as ',' "
                             "';' or \"\\t\"")
        return v

    @field_validator("encoding")
    @classmethod
    def _enc(cls, v: str) -> str:
        try:
            info = codecs.lookup(v)
        except LookupError:
            raise ValueError(f"unknown text encoding {v!r}; use e.g. 'utf-8' or 'latin-1'") from None
        if not getattr(info, "_is_text_encoding", True):
            raise ValueError(f"{v!r} is not a text encoding; use e.g. 'utf-8' or 'latin-1'")
        return v

    @field_validator("variables")
    @classmethod
    def _vars(cls, v: dict) -> dict:
        for name in v:
            if name not in KNOWN_VARIABLES:
                raise ValueError(f"unknown variable {name!r}; use one of {', '.join(sorted(KNOWN_VARIABLES))}")
        return v

    @model_validator(mode="after")
    def _columns(self):
        cols = list(self.time.columns) + [s.column for s in self.variables.values()]
        if not self.column_names and any(isinstance(c, str) for c in cols):
            raise ValueError("column_names = false, so columns must be given by 0-based number")
        if self.decimal == self.delimiter:
            raise ValueError(f"decimal and delimiter are both {self.delimiter!r}; numbers could not be told "
                             "from fields")
        return self

    def reads(self, file_name: str) -> bool:
        return fnmatch.fnmatch(file_name, self.file_glob)


class LayoutSet(_Strict):
    layout: dict[str, Layout] = Field(min_length=1)

    @field_validator("layout")
    @classmethod
    def _names(cls, v: dict) -> dict:
        for name in v:
            check_safe_id(name, "layout name")
        return v


class LoadedLayouts:
    def __init__(self, model: LayoutSet, path: Path, sha256: str, hashes: dict[str, str]):
        self.model, self.path, self.sha256, self.hashes = model, path, sha256, hashes

    @property
    def layouts(self) -> dict[str, Layout]:
        return self.model.layout


def load_layouts(path: str | Path) -> LoadedLayouts:
    """Read and validate a logger layout file; raise ConfigError naming file and key."""
    path = Path(path)
    data = read_toml(path)
    model = validate(LayoutSet, data, path)
    hashes = {name: content_sha256(body) for name, body in data.get("layout", {}).items()}
    return LoadedLayouts(model, path, content_sha256(data), hashes)
