"""Manual review annotations: a reviewer's flags over time ranges.

File format (TOML, our own)::

    [[annotation]]
    station = "kc-low"
    variables = ["ph"]                 # or ["all"]
    start = 2026-10-01T00:00:00Z       # UTC, inclusive
    end = 2026-10-03T12:00:00Z         # UTC, inclusive
    flag = 4                           # 1 pass, 3 suspect, 4 fail (IOC primary flags)
    reason = "sonde fouled: found covered in weed at the field visit"
    reviewer = "A. Reviewer"
    date = 2026-10-06                  # when the review was made

Applied as their own check (``<var>_qc_manual``, standard name quality_flag),
which takes precedence over the automated checks in the aggregate.
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path
from typing import Literal

from pydantic import AwareDatetime, BaseModel, ConfigDict, Field, model_validator

from .loading import StationId, content_sha256, read_toml, validate


class Annotation(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)
    station: StationId
    variables: list[str] = Field(min_length=1)
    start: AwareDatetime
    end: AwareDatetime
    flag: Literal[1, 3, 4]
    reason: str = Field(min_length=3)
    reviewer: str = Field(min_length=1)
    date: dt.date


    @model_validator(mode="after")
    def _order(self):
        if self.end < self.start:
            raise ValueError(f"end {self.end.isoformat()} is before start {self.start.isoformat()}; swap them")
        return self

    def applies_to(self, station: str, variable: str) -> bool:
        return self.station == station and ("all" in self.variables or variable in self.variables)

    def as_dict(self) -> dict:
        return {"station": self.station, "variables": list(self.variables),
                "start": self.start.astimezone(dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
                "end": self.end.astimezone(dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
                "flag": self.flag, "reason": self.reason, "reviewer": self.reviewer, "date": self.date.isoformat()}


class AnnotationFile(BaseModel):
    """The whole annotations file: its ``[[annotation]]`` tables."""
    model_config = ConfigDict(extra="forbid")
    annotation: list[Annotation] = []


class Annotations:
    def __init__(self, items: list[Annotation], path: Path | None):
        self.items, self.path = items, path

    def for_station(self, station: str) -> list[Annotation]:
        return [a for a in self.items if a.station == station]

    def sha256_for(self, station: str) -> str:
        return content_sha256([a.as_dict() for a in self.for_station(station)])


def load_annotations(path: str | Path | None) -> Annotations:
    """Read and validate an annotations file; no file (None) means no annotations."""
    if path is None:
        return Annotations([], None)
    path = Path(path)
    if not path.exists():
        return Annotations([], path)
    data = read_toml(path)
    model = validate(AnnotationFile, data, path)
    return Annotations(model.annotation, path)
