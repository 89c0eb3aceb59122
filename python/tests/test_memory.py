"""Zero copy: scoring a 1-million-row pyarrow table raises the process's peak resident
memory by less than the table's own size plus the output columns (measured in a fresh
subprocess: the peak is reset through /proc/self/clear_refs before scoring and read from
VmHWM after; Linux proc(5))."""

from __future__ import annotations

import json
import subprocess
import sys
import textwrap

import pytest

SCRIPT = textwrap.dedent(
    """
    import gc, json, sys
    import numpy as np
    import pyarrow as pa
    import kernlake

    def status(key):
        with open("/proc/self/status") as f:
            for line in f:
                if line.startswith(key + ":"):
                    return int(line.split()[1]) * 1024
        raise KeyError(key)

    model = kernlake.Model.load(sys.argv[1])
    n = 1_000_000
    rng = np.random.default_rng(7)
    table = pa.table({name: rng.normal(size=n) for name in model.inputs} | {"site": np.arange(n)})
    model.score(table.slice(0, 1000))  # thread pool, lazy imports
    gc.collect()
    with open("/proc/self/clear_refs", "w") as f:
        f.write("5")
    before = status("VmRSS")
    out = model.score(table)
    peak = status("VmHWM")
    outputs = sum(out.column(c).nbytes for c in out.column_names if c not in table.column_names)
    print(json.dumps({"rise": peak - before, "table": table.nbytes, "outputs": outputs,
                      "rows": out.num_rows}))
    """
)


def test_scoring_a_million_rows_does_not_copy_the_table(small_model):
    _, path = small_model
    try:
        with open("/proc/self/clear_refs", "w") as f:
            f.write("5")
    except OSError:
        pytest.fail("this check needs Linux's /proc/self/clear_refs to reset the peak RSS")
    done = subprocess.run([sys.executable, "-c", SCRIPT, str(path)], capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    m = json.loads(done.stdout)
    assert m["rows"] == 1_000_000
    print(m)
    assert m["rise"] < m["table"] + m["outputs"], m
