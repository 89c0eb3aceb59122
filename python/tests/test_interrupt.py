"""Ctrl-C during a long fit: the fit stops at the next block or pass with
KeyboardInterrupt, nothing is written, and the interpreter goes on (common practice:
SIGINT becomes KeyboardInterrupt in Python)."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import textwrap
import time

SCRIPT = textwrap.dedent(
    """
    import sys, time
    import numpy as np
    import kernlake

    rng = np.random.default_rng(1)
    x = rng.normal(size=(200_000, 6))
    y = np.sin(x[:, 0]) + rng.normal(size=200_000)
    print("ready", flush=True)
    t0 = time.monotonic()
    try:
        # a gap tolerance of zero never stops early: only the epoch limit or Ctrl-C does
        kernlake.fit(x, y, dim=1024, tol=0.0, epochs=10_000, patience=0, holdout=0.0,
                     loss="l1", seed=1, threads=1, gamma=0.5, c=1.0, epsilon=0.1,
                     memory="64MiB")
    except KeyboardInterrupt:
        print(f"interrupted after {time.monotonic() - t0:.1f}s", flush=True)
        # the interpreter still works
        m = kernlake.fit(x[:500], y[:500], dim=16, gamma=1.0, c=1.0, epsilon=0.1)
        print("alive", len(m.inputs), flush=True)
        sys.exit(0)
    print("finished without interruption", flush=True)
    sys.exit(3)
    """
)


def test_ctrl_c_interrupts_a_long_fit(tmp_path):
    proc = subprocess.Popen([sys.executable, "-c", SCRIPT], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, cwd=tmp_path)
    assert proc.stdout.readline().strip() == "ready"
    time.sleep(3.0)
    os.kill(proc.pid, signal.SIGINT)
    try:
        out, err = proc.communicate(timeout=120)
    except subprocess.TimeoutExpired:
        proc.kill()
        raise AssertionError("the fit did not stop after Ctrl-C")
    assert proc.returncode == 0, (out, err)
    assert "interrupted after" in out
    assert "alive 6" in out
    assert list(tmp_path.iterdir()) == []  # nothing written
