"""Flag differences between two versions of a dataset: what moved between flag classes, when, and why.

Pure comparison of arrays plus the recorded QC inputs; reading the two files
is left to the caller (``flag_diff_files``).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .checks import FLAG_MEANINGS, FLAG_VALUES
from .lineage import differences

WORDS = dict(zip((int(v) for v in FLAG_VALUES), FLAG_MEANINGS.split()))


@dataclass
class Move:
    variable: str
    check: str                  # a check name or "aggregate"
    from_flag: int | None       # None: the check did not exist in the older version
    to_flag: int | None
    count: int
    ranges: list[tuple[str, str]]   # UTC time ranges of the moved samples (contiguous runs)

    def describe(self) -> str:
        a = "absent" if self.from_flag is None else WORDS[self.from_flag]
        b = "absent" if self.to_flag is None else WORDS[self.to_flag]
        return f"{self.variable} {self.check}: {self.count} sample(s) {a} -> {b}"


@dataclass
class FlagDiff:
    old_id: str
    new_id: str
    common_samples: int
    only_old: int
    only_new: int
    moves: list[Move] = field(default_factory=list)
    input_changes: list[str] = field(default_factory=list)

    def lines(self) -> list[str]:
        out = [f"{self.old_id} -> {self.new_id}: {self.common_samples} samples in both, {self.only_old} only in "
               f"the older, {self.only_new} only in the newer"]
        out += ["what changed in the inputs:"] + [f"  {c}" for c in self.input_changes] if self.input_changes \
            else ["inputs: no recorded difference"]
        if not self.moves:
            out.append("no flag changed")
        for m in self.moves:
            shown = ", ".join(f"{a} to {b}" for a, b in m.ranges[:3])
            more = f" and {len(m.ranges) - 3} more ranges" if len(m.ranges) > 3 else ""
            out.append(f"  {m.describe()} ({shown}{more})")
        return out


def _iso(t) -> str:
    return np.datetime_as_string(np.datetime64(t, "s"), unit="s") + "Z"


def _ranges(times: np.ndarray, mask: np.ndarray) -> list[tuple[str, str]]:
    idx = np.flatnonzero(mask)
    if idx.size == 0:
        return []
    breaks = np.flatnonzero(np.diff(idx) > 1)
    starts = np.concatenate(([idx[0]], idx[breaks + 1]))
    ends = np.concatenate((idx[breaks], [idx[-1]]))
    return [(_iso(times[a]), _iso(times[b])) for a, b in zip(starts, ends)]


def flag_moves(times, old_flags: dict[str, dict[str, np.ndarray]], new_flags: dict[str, dict[str, np.ndarray]]
               ) -> list[Move]:
    """Counts of samples moving between flag classes, per variable and check, on common ``times``.

    ``old_flags`` / ``new_flags``: {variable: {check: int8 array on times}}.  A
    check present in only one version moves every sample from/to "absent".
    Time ranges are runs of consecutive common samples that moved.
    """
    times = np.asarray(times)
    moves: list[Move] = []
    for var in sorted(set(old_flags) | set(new_flags)):
        o, n = old_flags.get(var, {}), new_flags.get(var, {})
        for check in sorted(set(o) | set(n), key=lambda c: (c == "aggregate", c)):
            a, b = o.get(check), n.get(check)
            if a is None or b is None:
                present = b if a is None else a
                for v in np.unique(present):
                    mask = present == v
                    moves.append(Move(var, check, None if a is None else int(v), None if b is None else int(v),
                                      int(mask.sum()), _ranges(times, mask)))
                continue
            changed = a != b
            if not changed.any():
                continue
            pairs = np.stack([a[changed], b[changed]], axis=1)
            for fa, fb in np.unique(pairs, axis=0):
                mask = changed & (a == fa) & (b == fb)
                moves.append(Move(var, check, int(fa), int(fb), int(mask.sum()), _ranges(times, mask)))
    return moves


def _flags_of(ds) -> dict[str, dict[str, np.ndarray]]:
    out: dict[str, dict[str, np.ndarray]] = {}
    for name in ds.data_vars:
        std = ds[name].attrs.get("standard_name", "")
        if not std.endswith("quality_flag"):
            continue
        if name.endswith("_qc"):
            var, check = name[:-3], "aggregate"
        elif "_qc_" in name:
            var, check = name.split("_qc_", 1)
        else:
            continue
        out.setdefault(var, {})[check] = ds[name].values
    return out


def flag_diff_datasets(old, new, *, old_inputs: dict | None = None, new_inputs: dict | None = None) -> FlagDiff:
    """Diff of two loaded versions (xarray Datasets) on their common timestamps."""
    to = old["time"].values
    tn = new["time"].values
    common, io_, in_ = np.intersect1d(to, tn, assume_unique=True, return_indices=True)
    of = {v: {c: a[io_] for c, a in per.items()} for v, per in _flags_of(old).items()}
    nf = {v: {c: a[in_] for c, a in per.items()} for v, per in _flags_of(new).items()}
    diff = FlagDiff(old.attrs.get("id", "old"), new.attrs.get("id", "new"), int(common.size),
                    int(to.size - common.size), int(tn.size - common.size), flag_moves(common, of, nf))
    if old_inputs is not None and new_inputs is not None:
        diff.input_changes = differences(old_inputs, new_inputs)
    return diff


def flag_diff_files(old_path, new_path, *, old_inputs=None, new_inputs=None) -> FlagDiff:
    from .archive.ncio import read_dataset

    return flag_diff_datasets(read_dataset(old_path), read_dataset(new_path), old_inputs=old_inputs,
                              new_inputs=new_inputs)
