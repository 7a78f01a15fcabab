"""`fieldplan serve --tls-cert/--tls-key`: the workspace over HTTPS (phones need it for positions)."""

from __future__ import annotations

import shutil
import socket
import subprocess
import sys
import time

import pytest

pytest.importorskip("uvicorn")
httpx = pytest.importorskip("httpx")


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_tls_options_go_together(tmp_path):
    from typer.testing import CliRunner

    from fieldplan.cli.main import app as cli

    cert = tmp_path / "cert.pem"
    cert.write_text("x")
    result = CliRunner().invoke(cli, ["serve", str(tmp_path), "--tls-cert", str(cert)])
    assert result.exit_code == 2 and "go together" in result.output
    result = CliRunner().invoke(
        cli, ["serve", str(tmp_path), "--tls-cert", str(cert), "--tls-key", str(tmp_path / "none.pem")]
    )
    assert result.exit_code == 2 and "no such file" in result.output


@pytest.mark.skipif(shutil.which("openssl") is None, reason="needs the openssl command to make a test certificate")
def test_serves_the_workspace_over_https_on_loopback(tmp_path):
    cert, key = tmp_path / "cert.pem", tmp_path / "key.pem"
    subprocess.run(
        ["openssl", "req", "-x509", "-newkey", "rsa:2048", "-nodes", "-days", "1", "-subj", "/CN=127.0.0.1", "-addext", "subjectAltName=IP:127.0.0.1",
         "-keyout", str(key), "-out", str(cert)],
        check=True, capture_output=True,
    )  # fmt: skip
    port = _free_port()
    ws = tmp_path / "ws"
    ws.mkdir()
    cmd = [sys.executable, "-c", "from fieldplan.cli.main import run; run()", "serve", str(ws)]
    cmd += ["--port", str(port), "--tls-cert", str(cert), "--tls-key", str(key)]
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        deadline = time.monotonic() + 30
        while True:
            try:
                # reference: RFC 8446 (TLS 1.3) handshake through httpx/ssl; the certificate is our own
                response = httpx.get(f"https://127.0.0.1:{port}/", verify=str(cert), timeout=2)
                break
            except httpx.TransportError:
                if time.monotonic() > deadline or proc.poll() is not None:
                    raise
                time.sleep(0.3)
        assert response.status_code == 200
        with pytest.raises(httpx.TransportError):
            httpx.get(f"http://127.0.0.1:{port}/", timeout=2)  # plain HTTP is not answered
    finally:
        proc.terminate()
        out, _ = proc.communicate(timeout=20)
    assert f"https://127.0.0.1:{port}/" in out
