"""Object-store paths from Python against a real S3-compatible server on 127.0.0.1
(moto's server, installed into .venv by scripts/setup). The bytes cross HTTP with signed
requests; the same job on the same files from a local folder is the reference (common
practice: an object listing must give the same data as the files themselves)."""

from __future__ import annotations

import http.client
import os
import pathlib
import socket
import subprocess
import sys
import time

import pytest

import kernlake

SERVER = pathlib.Path(sys.executable).parent / "moto_server"


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.fixture(scope="module")
def s3():
    """The server on a free port, with the standard AWS_* variables pointing at it."""
    if not SERVER.exists():
        if os.environ.get("CI") == "true":
            pytest.fail(f"{SERVER} is missing under CI: scripts/setup installs moto[server]")
        pytest.skip("no S3-compatible server: run scripts/setup")
    port = _free_port()
    proc = subprocess.Popen([str(SERVER), "-H", "127.0.0.1", "-p", str(port)],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    deadline = time.monotonic() + 60
    while True:
        try:
            socket.create_connection(("127.0.0.1", port), timeout=1).close()
            break
        except OSError:
            assert time.monotonic() < deadline, "the S3 server did not start"
            time.sleep(0.1)
    env = {
        "AWS_ENDPOINT_URL": f"http://127.0.0.1:{port}",
        "AWS_ALLOW_HTTP": "true",
        "AWS_ACCESS_KEY_ID": "testing",
        "AWS_SECRET_ACCESS_KEY": "testing",
        "AWS_REGION": "us-east-1",
        "KERNLAKE_STORE_RETRIES": "1",
    }
    saved = {k: os.environ.get(k) for k in env}
    os.environ.update(env)
    yield port
    for k, v in saved.items():
        if v is None:
            os.environ.pop(k, None)
        else:
            os.environ[k] = v
    proc.terminate()
    proc.wait(timeout=30)


def _put(port: int, path: str, body: bytes = b"") -> None:
    """One unsigned request of the test's own (the server accepts it)."""
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=60)
    try:
        conn.request("PUT", path, body=body)
        answer = conn.getresponse()
        answer.read()
        assert answer.status == 200, f"PUT {path} answered {answer.status}"
    finally:
        conn.close()


def _upload(port: int, bucket: str, folder: pathlib.Path, prefix: str) -> None:
    _put(port, f"/{bucket}")
    for f in sorted(folder.rglob("*")):
        if f.is_file():
            _put(port, f"/{bucket}/{prefix}/{f.relative_to(folder).as_posix()}", f.read_bytes())


def test_fit_from_s3_gives_the_local_model_bytes_and_models_round_trip(s3, ccpp_lake):
    _upload(s3, "pylake", ccpp_lake, "lake")
    opts = dict(target="PE", dim=128, seed=5, progress=False)
    local = kernlake.fit(str(ccpp_lake), **opts)
    remote = kernlake.fit("s3://pylake/lake/", **opts)
    assert remote.to_bytes() == local.to_bytes()

    remote.save("s3://pylake/models/ccpp.klm")
    back = kernlake.Model.load("s3://pylake/models/ccpp.klm")
    assert back.to_bytes() == local.to_bytes()


def test_a_missing_bucket_raises_an_io_error_naming_the_url(s3):
    with pytest.raises(kernlake.IOError, match=r"s3://no-such-bucket-py/lake.*bucket does not exist"):
        kernlake.fit("s3://no-such-bucket-py/lake/", target="PE", progress=False)
    with pytest.raises(kernlake.IOError, match=r"s3://no-such-bucket-py/m\.klm"):
        kernlake.Model.load("s3://no-such-bucket-py/m.klm")
