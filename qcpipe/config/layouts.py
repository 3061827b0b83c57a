"""Logger layouts: how a raw file of one logger type is read.

File format (TOML, our own)::

    [layout.<name>]
    description = "..."
    file_glob = "*.csv"            # which file names this layout reads
    encoding = "utf-8"             # a UTF-8 byte-order mark is dropped; "utf-16" reads its own
    delimiter = ","                # one character, "\\t" for tab, or "whitespace" (runs of spaces/tabs)
    quote = '"'                    # fields may be quoted (RFC 4180, "" inside is one "); "" = no quoting
    header_lines = 4               # metadata lines before the column-name row ...
    header_ends = "^-- data --$"   # ... or: the header runs up to and including the first line
                                   # that matches this pattern (not both)
    column_names = true            # a row of column names follows the header
    decimal = "."                  # or ","
    thousands = ""                 # digit-group mark inside numbers: "", ",", ".", " ", "'" or "_"
    missing = ["", "NaN"]          # texts that mean no value
    skip_lines = ["^#", "^EVENT"]  # data lines that are not records (patterns); counted, listed
    bad_lines = "reject"           # or "skip": unreadable records are dropped, counted and listed
    time = { columns = ["date", "time"], format = "%d.%m.%Y %H:%M:%S" }
    serial = { source = "header", pattern = "^# unit (\\S+)" }   # or source = "filename"
    [layout.<name>.header_values]  # named values from header lines: a pattern with one (group)
    utc_offset = "^UTC offset\\s*[:=]\\s*(\\S+)"
    interval = "^interval\\s*[:=]\\s*(.+)$"
    [layout.<name>.variables]
    temperature = { column = "temp", units = "degC", units_from = "temp_units" }

Columns are named (with ``column_names = true``) or 0-based numbers.
Several time columns are joined with one space before ``format`` is applied.

``time.format`` is a strftime format (``%y`` two-digit years, ``%I``/``%p``
12-hour clocks, ``%j`` day of the year, ``%z`` a UTC offset or ``Z`` on every
row), or one of the words ``"epoch_seconds"``, ``"epoch_milliseconds"`` (time
since 1970-01-01 UTC) and ``"iso8601"`` (ISO 8601 stamps that each end in
``Z`` or a numeric offset; rows may differ in offset).

Where the stamps are in a known zone, the reader returns UTC:
``time.zone`` declares the zone of the logger's clock (``"UTC"``, a fixed
offset ``"+01:00"`` or an IANA name such as ``"Europe/Lisbon"``, with its
daylight-saving changes), ``time.zone_from`` names a header value holding it.
Stamps with ``%z``, ``iso8601`` or epoch formats carry their zone themselves.
Without any of these the stamps are the logger's own clock and the station
register's ``clock_offset`` puts them on UTC.

``units_from`` names a header value that states a column's unit: the file is
rejected when it does not equal ``units`` (the layout was written for another
setting of the logger).
"""

from __future__ import annotations

import codecs
import datetime as dt
import fnmatch
import re
import zoneinfo
from pathlib import Path
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, field_validator, model_validator

from ..units import UnitError, check_raw_unit
from .rules import VARIABLE_UNITS
from .loading import check_safe_id, content_sha256, read_toml, validate

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
#: the unit each raw variable is stored in (its raw unit must convert to it); None: any reading
STORED_UNIT_OF = {**VARIABLE_UNITS, "ph_mv": "V", "probe_reading": None}


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, allow_inf_nan=False)


def _column_number(v):
    if isinstance(v, int) and v < 0:
        raise ValueError(f"column numbers count from 0, got {v}")
    return v


#: ``time.format`` words for stamps that are not strftime text
TIME_WORDS = ("epoch_seconds", "epoch_milliseconds", "iso8601")
_OFFSET_RE = re.compile(r"^(?:UTC|GMT)?\s*([+-])(\d{1,2})(?::?(\d{2}))?$", re.IGNORECASE)


def offset_seconds(text: str) -> int | None:
    """Seconds east of UTC of an offset text ('+01:00', '-0330', '+1', 'UTC+2', 'Z', 'UTC'), else None."""
    t = text.strip()
    if t.upper() in ("Z", "UTC", "GMT"):
        return 0
    m = _OFFSET_RE.match(t)
    if not m:
        return None
    hours, minutes = int(m.group(2)), int(m.group(3) or 0)
    if hours > 18 or minutes > 59:
        return None
    return (-1 if m.group(1) == "-" else 1) * (hours * 3600 + minutes * 60)


def zone_of(text: str) -> int | zoneinfo.ZoneInfo | None:
    """A fixed offset in seconds east of UTC, or an IANA zone, from ``text``; None if it is neither."""
    off = offset_seconds(text)
    if off is not None:
        return off
    name = text.strip()
    if not name or name.startswith(("/", ".")) or ".." in name:
        return None
    try:
        return zoneinfo.ZoneInfo(name)
    except (zoneinfo.ZoneInfoNotFoundError, ValueError, OSError):
        return None


def _regex(v: str, what: str, groups: int | None = None) -> str:
    try:
        rx = re.compile(v)
    except re.error as err:
        raise ValueError(f"{what} is not a valid regular expression ({err})") from None
    if groups is not None and rx.groups != groups:
        raise ValueError(f"{what} needs exactly {groups} (group) capturing the value, found {rx.groups}")
    return v


class TimeSpec(_Strict):
    columns: list[str | int] = Field(min_length=1)
    format: str
    zone: str | None = Field(None, description="zone of the stamps: 'UTC', '+01:00' or an IANA name")
    zone_from: str | None = Field(None, description="name of a header value holding the zone or offset")

    @field_validator("format")
    @classmethod
    def _has_directives(cls, v: str) -> str:
        if v in TIME_WORDS:
            return v
        if "%" not in v:
            raise ValueError(f"time format needs strftime directives such as '%Y-%m-%d %H:%M:%S', or one of "
                             f"{', '.join(TIME_WORDS)}")
        sample = dt.datetime(2026, 10, 5, 13, 24, 57, tzinfo=dt.timezone(dt.timedelta(hours=2)))
        try:
            dt.datetime.strptime(sample.strftime(v), v)
        except ValueError as err:
            raise ValueError(f"time format {v!r} cannot be read back ({err}); use strftime directives "
                             "such as '%Y-%m-%d %H:%M:%S'") from None
        return v

    @field_validator("zone")
    @classmethod
    def _zone(cls, v):
        if v is not None and zone_of(v) is None:
            raise ValueError(f"time zone {v!r} is neither a UTC offset nor a known IANA zone name; use e.g. "
                             "'UTC', '+01:00' or 'Europe/Lisbon'")
        return v

    @field_validator("columns")
    @classmethod
    def _numbers(cls, v: list) -> list:
        return [_column_number(c) for c in v]

    @property
    def carries_zone(self) -> bool:
        """True when every stamp says its own zone (epoch, ISO 8601 with offsets, %z)."""
        return self.format in TIME_WORDS or "%z" in self.format

    @model_validator(mode="after")
    def _one_zone(self):
        if self.carries_zone and (self.zone or self.zone_from):
            raise ValueError(f"time format {self.format!r} gives each stamp its own zone, so zone and zone_from "
                             "must not be set; remove them")
        if self.zone and self.zone_from:
            raise ValueError("time.zone and time.zone_from both set; keep one")
        if self.format in ("epoch_seconds", "epoch_milliseconds", "iso8601") and len(self.columns) != 1:
            raise ValueError(f"time format {self.format!r} reads one column; give one column")
        return self


class SerialSpec(_Strict):
    source: Literal["header", "filename"]
    pattern: str = Field(description="regular expression with one group capturing the serial")

    @field_validator("pattern")
    @classmethod
    def _regex(cls, v: str) -> str:
        _regex(v, "pattern")
        if re.compile(v).groups < 1:
            raise ValueError("pattern needs one (group) capturing the serial number")
        return v


class VariableSpec(_Strict):
    column: str | int
    units: str
    units_from: str | None = Field(None, description="header value that must state the same unit")

    _c = field_validator("column")(classmethod(lambda cls, v: _column_number(v)))

    @field_validator("units")
    @classmethod
    def _units(cls, v: str) -> str:
        return check_raw_unit(v)


#: the ``delimiter`` word for fields separated by runs of spaces or tabs
WHITESPACE = "whitespace"


class Layout(_Strict):
    description: str = ""
    file_glob: str = "*"
    encoding: str = "utf-8"
    delimiter: str = ","
    quote: str = '"'
    header_lines: int = Field(0, ge=0, le=200)
    header_ends: str | None = None
    header_values: dict[str, str] = {}
    column_names: bool = True
    decimal: Literal[".", ","] = "."
    thousands: Literal["", ",", ".", " ", "'", "_"] = ""
    missing: list[str] = ["", "NaN", "nan", "NA"]
    skip_lines: list[str] = []
    bad_lines: Literal["reject", "skip"] = "reject"
    time: TimeSpec
    serial: SerialSpec
    variables: dict[str, VariableSpec] = Field(min_length=1)

    @field_validator("delimiter")
    @classmethod
    def _delim(cls, v: str) -> str:
        if v == "\\t":
            v = "\t"
        if v == WHITESPACE:
            return v
        if len(v) != 1:
            raise ValueError(f"delimiter must be one character (write \"\\t\" for tab) or {WHITESPACE!r}")
        if v != "\t" and not v.isprintable() or v.isalnum():
            raise ValueError(f"delimiter {v!r} cannot separate fields; use a printable mark such as ',' "
                             "';' or \"\\t\"")
        return v

    @field_validator("quote")
    @classmethod
    def _quote(cls, v: str) -> str:
        if len(v) > 1 or (v and (v.isalnum() or v.isspace() or not v.isprintable())):
            raise ValueError("quote must be one printable mark such as '\"' or \"'\", or \"\" for no quoting")
        return v

    @field_validator("header_ends")
    @classmethod
    def _ends(cls, v):
        return v if v is None else _regex(v, "header_ends")

    @field_validator("header_values")
    @classmethod
    def _header_values(cls, v: dict) -> dict:
        for name, pattern in v.items():
            check_safe_id(name, "header value name")
            _regex(pattern, f"header value {name!r}", groups=1)
        return v

    @field_validator("skip_lines")
    @classmethod
    def _skips(cls, v: list) -> list:
        for i, pattern in enumerate(v):
            _regex(pattern, f"skip_lines[{i}]")
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
        for name, spec in v.items():
            if name not in KNOWN_VARIABLES:
                raise ValueError(f"unknown variable {name!r}; use one of {', '.join(sorted(KNOWN_VARIABLES))}")
            try:
                check_raw_unit(spec.units, stored=STORED_UNIT_OF.get(name))
            except UnitError as err:
                raise ValueError(f"{name}: {err}") from None
        return v

    @model_validator(mode="after")
    def _columns(self):
        cols = list(self.time.columns) + [s.column for s in self.variables.values()]
        if not self.column_names and any(isinstance(c, str) for c in cols):
            raise ValueError("column_names = false, so columns must be given by 0-based number")
        if self.decimal == self.delimiter:
            raise ValueError(f"decimal and delimiter are both {self.delimiter!r}; numbers could not be told "
                             "from fields")
        if self.thousands and self.thousands == self.decimal:
            raise ValueError(f"thousands and decimal are both {self.decimal!r}; set thousands to another mark "
                             "or to \"\"")
        if self.thousands and self.thousands == self.delimiter and not self.quote:
            raise ValueError(f"thousands and delimiter are both {self.delimiter!r} without quoting; set quote "
                             "to '\"' (numbers with that mark are then quoted) or thousands to \"\"")
        if self.thousands == " " and self.delimiter == WHITESPACE:
            raise ValueError("thousands = \" \" cannot be read with delimiter = \"whitespace\"; set thousands to "
                             "another mark")
        if self.quote and self.quote in (self.delimiter, self.decimal, self.thousands):
            raise ValueError(f"quote {self.quote!r} is also the delimiter, decimal or thousands mark; set "
                             "quote to another mark or to \"\"")
        if self.header_ends is not None and self.header_lines:
            raise ValueError("header_lines and header_ends both set; keep one (header_ends for headers whose "
                             "length varies)")
        named = [("time.zone_from", self.time.zone_from)] + [
            (f"variables.{v}.units_from", s.units_from) for v, s in self.variables.items()]
        for key, ref in named:
            if ref is not None and ref not in self.header_values:
                raise ValueError(f"{key} names header value {ref!r}, which header_values does not define; add "
                                 f"a pattern for it to header_values")
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
