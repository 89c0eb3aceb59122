"""The Python surface: defaults equal to the command line's, model bytes and files,
pickling, plain-value properties, audit and tune records equal to the CLI's --json, the
GIL released while the library works (common practice: one engine, two front doors)."""

from __future__ import annotations

import inspect
import json
import pickle
import threading
import time

import numpy as np

import kernlake
from kernlake import _native


def test_fit_signature_defaults_are_the_clis():
    cli = _native.fit_defaults()
    sig = inspect.signature(kernlake.fit).parameters
    for name, value in cli.items():
        assert sig[name].default == value, name


def test_bytes_files_and_pickle_round_trip(small_model, tmp_path, ccpp_arrays):
    model, path = small_model
    x, _ = ccpp_arrays
    data = model.to_bytes()
    assert data == path.read_bytes()
    again = kernlake.Model.from_bytes(data)
    assert again.to_bytes() == data
    other = tmp_path / "again.klm"
    again.save(other)
    assert kernlake.Model.load(other).to_bytes() == data
    unpickled = pickle.loads(pickle.dumps(model))
    assert np.array_equal(unpickled.predict(x[:100]), model.predict(x[:100]))


def test_properties_are_plain_values(small_model, cli):
    model, path = small_model
    assert model.inputs == ["AT", "V", "AP", "RH"]
    assert model.target == "y"
    p = model.parameters
    assert p["kernel"]["gamma"] == 1.0
    assert p["features"] == 256
    json.dumps(p)
    inspected = json.loads(cli("inspect", path, "--json").stdout)
    assert model.report == json.loads(json.dumps(inspected["report"]))
    assert p["problem"] == inspected["problem"]
    r = repr(model)
    assert r.startswith("kernlake.Model(") and "dim=256" in r
    assert "Gaussian" in model.describe() or "gaussian" in model.describe()


def test_audit_returns_the_clis_json_record(cli, ccpp_lake, tmp_path):
    out = tmp_path / "audit.json"
    args = ["-D", "64,128", "--maps", "fourier", "--sample", "1000", "--seed", "4",
            "--threads", "1", "--target", "PE"]
    cli("audit", ccpp_lake, *args, "--json", out)
    expected = json.loads(out.read_text())
    got, svg = kernlake.audit(str(ccpp_lake), "PE", dim=[64, 128], maps=["fourier"],
                              sample=1000, seed=4, threads=1, plot=True)
    assert set(got) == set(expected)
    assert svg.lstrip().startswith("<svg") or "<svg" in svg[:200]
    _same_but_times(got, expected)


def test_tune_returns_the_clis_json_record(cli, ccpp_lake, tmp_path):
    out = tmp_path / "tune.json"
    cli("tune", ccpp_lake, "--target", "PE", "--sample", "800", "--seed", "2", "--threads", "1",
        "-D", "64", "--max-dim", "64", "--gamma-factors", "0.5,1", "--c-factors", "1,10",
        "--epsilon-factors", "1", "--json", out)
    expected = json.loads(out.read_text())
    got = kernlake.tune(str(ccpp_lake), "PE", sample=800, seed=2, threads=1, dim=64, max_dim=64,
                        gamma_factors=[0.5, 1], c_factors=[1, 10], epsilon_factors=[1])
    assert set(got) == set(expected)
    _same_but_times(got, expected)
    rec, svg = kernlake.tune(str(ccpp_lake), "PE", sample=800, seed=2, threads=1, dim=64,
                             max_dim=64, gamma_factors=[0.5, 1], c_factors=[1, 10],
                             epsilon_factors=[1], heatmap=True)
    assert "<svg" in svg
    # keep_map=True is the command line's --keep-map: only the random map is tried.
    cli("tune", ccpp_lake, "--target", "PE", "--sample", "800", "--seed", "2", "--threads", "1",
        "-D", "64", "--max-dim", "64", "--gamma-factors", "0.5,1", "--c-factors", "1,10",
        "--epsilon-factors", "1", "--keep-map", "--json", out)
    kept = kernlake.tune(str(ccpp_lake), "PE", sample=800, seed=2, threads=1, dim=64, max_dim=64,
                         gamma_factors=[0.5, 1], c_factors=[1, 10], epsilon_factors=[1],
                         keep_map=True)
    _same_but_times(kept, json.loads(out.read_text()))
    assert {d["map"] for d in kept["dims"]} == {"fourier"}


def _same_but_times(a, b, where="record"):
    """Equal records, except wall-clock figures (keys naming seconds or time)."""
    if isinstance(a, dict):
        assert set(a) == set(b), where
        for k in a:
            if "second" in k or "time" in k:
                continue
            _same_but_times(a[k], b[k], f"{where}.{k}")
    elif isinstance(a, list):
        assert len(a) == len(b), where
        for i, (x, y) in enumerate(zip(a, b)):
            _same_but_times(x, y, f"{where}[{i}]")
    else:
        assert a == b, where


def test_the_gil_is_released_during_a_fit(ccpp_arrays):
    x, y = ccpp_arrays
    ticks = []
    stop = threading.Event()

    def tick():
        while not stop.is_set():
            ticks.append(time.monotonic())
            time.sleep(0.01)

    t = threading.Thread(target=tick)
    t.start()
    t0 = time.monotonic()
    kernlake.fit(x, y, dim=512, gamma=1.0, seed=1, threads=1, holdout=0.0)
    t1 = time.monotonic()
    stop.set()
    t.join()
    during = [s for s in ticks if t0 < s < t1]
    # a thread holding the GIL for the whole fit would leave no ticks in between
    assert len(during) >= max(1, int((t1 - t0) / 0.01 * 0.5)), (len(during), t1 - t0)
