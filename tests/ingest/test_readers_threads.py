"""Raw files read in parallel threads (the orchestrator's default runner) read as they do one at a time.

The reader learns of over-long records from pandas' parser warnings; warnings are process-wide
state, and without the reader's lock one thread's capture took another file's warnings (seen:
a file of 72 records read as 73, another quarantined).
"""

from __future__ import annotations

import threading
import tomllib

from qcpipe.config.layouts import LayoutSet
from qcpipe.errors import ParseError
from qcpipe.ingest.readers import read_raw_file
from tests.ingest import test_layouts_end_to_end as e2e


def test_parallel_reads_equal_single_reads(tmp_path):
    layouts = LayoutSet.model_validate(tomllib.loads(e2e.LAYOUTS)).layout
    for name, data in e2e.files().items():
        (tmp_path / name).write_bytes(data)
    # records each file holds by construction (tests/ingest/test_layouts_end_to_end.py): 72 samples;
    # the millisecond file has one unreadable record skipped and a cut last line dropped
    cases = [("IS-5_y.iso", "isorows", e2e.N), ("MS-6_z.msd", "millis", e2e.N - 1), ("KV-3.kv", "keyed", e2e.N)]
    wrong = []

    def work():
        for _ in range(15):
            for name, layout, want in cases:
                try:
                    got = len(read_raw_file(tmp_path / name, layouts[layout], layout))
                except ParseError as err:
                    got = str(err)
                if got != want:
                    wrong.append((name, got))

    threads = [threading.Thread(target=work) for _ in range(6)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert not wrong, wrong[:3]
