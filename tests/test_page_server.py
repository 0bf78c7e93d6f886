"""``kinetics watch --serve``: the live page and its assets only, on 127.0.0.1.

Real HTTP requests (``http.client``) against :class:`watchers.views.PageServer` on a
free local port.  The folder holds every file a run writes plus the ledger, another
file, a sub-folder and a secret one level up: only the four page files may come back.
"""

from __future__ import annotations

import http.client

import pytest

from kinetics.run.outputs import OUTPUT_NAMES
from watchers.views import PageServer


@pytest.fixture()
def served(tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    for name in OUTPUT_NAMES:
        (out / name).write_bytes(f"content of {name}".encode())
    (out / "ledger.sqlite").write_bytes(b"SQLite format 3\x00secret rows")
    (out / "notes.txt").write_text("private")
    (out / "sub").mkdir()
    (out / "sub" / "index.html").write_text("nested")
    (tmp_path / "secret.txt").write_text("outside the folder")
    server = PageServer(out).start()
    try:
        yield server
    finally:
        server.stop()


def _get(server, path, method="GET"):
    host, port = server.server.server_address[:2]
    connection = http.client.HTTPConnection(host, port, timeout=10)
    try:
        connection.putrequest(method, path, skip_accept_encoding=True)
        connection.endheaders()
        response = connection.getresponse()
        return response.status, response.read()
    finally:
        connection.close()


def test_binds_to_loopback_only(served):
    assert served.server.server_address[0] == "127.0.0.1"
    assert served.url.startswith("http://127.0.0.1:") and served.url.endswith("/index.html")


@pytest.mark.parametrize("name", OUTPUT_NAMES)
def test_page_and_assets_are_served(served, name):
    status, body = _get(served, "/" + name)
    assert status == 200
    assert body == f"content of {name}".encode()


def test_root_is_the_page_and_head_has_no_body(served):
    assert _get(served, "/") == (200, b"content of index.html")
    status, body = _get(served, "/index.html", method="HEAD")
    assert status == 200 and body == b""


@pytest.mark.parametrize("path", [
    "/ledger.sqlite", "/ledger.sqlite-journal", "/notes.txt", "/sub/", "/sub/index.html",
    "/sub", "/../secret.txt", "/%2e%2e/secret.txt", "/..%2fsecret.txt", "//etc/passwd",
    "/./index.html", "/index.html/", "/INDEX.HTML", "/index.html%00", "/%2F",
])
def test_everything_else_is_404(served, path):
    status, body = _get(served, path)
    assert status == 404
    assert b"secret" not in body and b"private" not in body and b"nested" not in body


def test_a_page_not_written_yet_is_404(tmp_path):
    server = PageServer(tmp_path).start()
    try:
        assert _get(server, "/index.html")[0] == 404
        assert _get(server, "/")[0] == 404
    finally:
        server.stop()


def test_a_page_file_that_is_a_link_out_of_the_folder_is_404(tmp_path):
    (tmp_path / "secret.txt").write_text("outside the folder")
    out = tmp_path / "out"
    out.mkdir()
    (out / "fit.json").symlink_to(tmp_path / "secret.txt")
    server = PageServer(out).start()
    try:
        status, body = _get(server, "/fit.json")
        assert status == 404 and b"outside" not in body
    finally:
        server.stop()
