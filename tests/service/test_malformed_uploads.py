"""The data crate's malformed-input corpus (crates/mixgauge-data/tests/malformed), over HTTP.

Why: the service reads untrusted uploads. Each bad file must be refused as the client's
mistake — a 4xx with the JSON error shape — whose message names what the command line names
for the same file (the row, column or field at fault), and the server must keep serving.

This mirrors crates/mixgauge-cli/tests/cli/malformed.rs: `expected.json` maps each file to
substrings its error message must contain, and to read options where the fault needs some.
Over HTTP those options go where the API takes them:
- no options: `POST /v1/datasets` with the Content-Type the file's extension implies;
- `columns`, `label_column`, `drop_incomplete`: the sweep's `data` options — the file is
  uploaded, then `POST /v1/sweeps` with `data` must be refused (or, if the upload itself is
  refused, that refusal must already name the fault);
- `max_rows`, `max_columns`: the server's `--max-rows` / `--max-columns` limits.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from mixgauge_under_test import REPO_ROOT
from service_helpers import CONTENT_TYPES

CORPUS = REPO_ROOT / "crates" / "mixgauge-data" / "tests" / "malformed"
EXPECTED = json.loads((CORPUS / "expected.json").read_text())

LIMIT_OPTIONS = {"max_rows", "max_columns"}

#: Small settings: a sweep the corpus provokes must be refused before it runs anyway.
SETTINGS = {"components": [1], "covariances": ["diagonal"], "folds": 2, "restarts": 1}


def cases(kind: str) -> list[str]:
    out = []
    for name, case in EXPECTED.items():
        options = set(case.get("options", {}))
        if kind == "plain" and not options:
            out.append(name)
        elif kind == "read" and options and not options & LIMIT_OPTIONS:
            out.append(name)
        elif kind == "limit" and options & LIMIT_OPTIONS:
            out.append(name)
    return out


def test_the_corpus_is_all_covered():
    """Every file of the corpus has an entry and is used by one of the tests below, and there
    are as many as the CLI's test expects (so a shrunken corpus cannot pass quietly)."""
    files = {p.name for p in CORPUS.iterdir()
             if p.suffix in CONTENT_TYPES and p.name != "expected.json"}
    assert files == set(EXPECTED)
    assert len(cases("plain")) + len(cases("read")) + len(cases("limit")) == len(EXPECTED)
    assert len(EXPECTED) >= 25


def assert_client_error(r, name: str, needles: list[str]) -> None:
    assert 400 <= r.status_code < 500, f"{name}: {r.status_code} {r.text}"
    assert r.headers.get("Content-Type", "").startswith("application/json"), (
        f"{name}: Content-Type {r.headers.get('Content-Type')}"
    )
    body = r.json()
    assert set(body) == {"error"}, f"{name}: {body}"
    err = body["error"]
    assert set(err) == {"code", "message", "detail"}, f"{name}: {err}"
    assert isinstance(err["code"], str) and err["code"], f"{name}: {err}"
    assert err["code"].replace("_", "").isalpha() and err["code"].islower(), f"{name}: {err}"
    assert isinstance(err["message"], str) and err["message"], f"{name}: {err}"
    assert err["detail"] is None or isinstance(err["detail"], dict), f"{name}: {err}"
    missing = [n for n in needles if n not in err["message"]]
    assert not missing, f"{name}: message lacks {missing}: {err['message']!r}"


def post_file(server, name: str):
    path = CORPUS / name
    return server.post("/v1/datasets", data=path.read_bytes(),
                       headers={"Content-Type": CONTENT_TYPES[path.suffix]})


def still_serving(server, iris_csv: Path) -> None:
    r = server.get("/readyz")
    assert r.status_code == 200 and r.json() == {"status": "ready"}, r.text
    good = server.post("/v1/datasets", data=iris_csv.read_bytes(),
                       headers={"Content-Type": "text/csv"})
    assert good.status_code in (200, 201), good.text
    assert good.json()["rows"] == 150


@pytest.fixture(scope="module")
def corpus_server(mixgauge_binary, tmp_path_factory):
    from service_helpers import Server

    root = tmp_path_factory.mktemp("corpus")
    (root / "logs").mkdir()
    s = Server(mixgauge_binary, root / "data", root / "logs", workers=1, args=[]).start()
    yield s
    s.stop()


@pytest.mark.parametrize("name", cases("plain"))
def test_malformed_upload_is_a_named_client_error(corpus_server, name):
    """The file, posted as it is, gets a 4xx whose JSON message names the fault as the CLI
    does. The one exception is a file whose only fault is missing or non-finite values: it is
    stored (a sweep may choose to drop incomplete rows) with those rows counted in
    `incomplete_rows`, and a sweep that reads it as it is must be refused with the reason."""
    r = post_file(corpus_server, name)
    if r.status_code in (200, 201):
        meta = r.json()
        assert meta["incomplete_rows"] > 0, f"{name}: stored as complete: {meta}"
        r = corpus_server.post("/v1/sweeps", json={"dataset": meta["id"], "settings": SETTINGS})
        name = f"{name} (sweep without dropping incomplete rows)"
    assert_client_error(r, name, EXPECTED[name.split(" ")[0]]["contains"])


@pytest.mark.parametrize("name", cases("read"))
def test_malformed_under_read_options_is_a_named_client_error(corpus_server, name):
    """The file with its read options (columns, labels, dropping incomplete rows) as the
    sweep's `data`: the first refusal — of the upload, or else of the sweep request — is a 4xx
    naming the fault as the CLI does for the same options. A sweep that is accepted and only
    fails later is not good enough: the request can be checked when it is made."""
    options = EXPECTED[name]["options"]
    data = {}
    if "columns" in options:
        data["columns"] = options["columns"]
    if "label_column" in options:
        data["labels"] = options["label_column"]
    if options.get("drop_incomplete"):
        data["drop_incomplete"] = True
    up = post_file(corpus_server, name)
    if up.status_code not in (200, 201):
        assert_client_error(up, f"{name} (upload, before the read options could apply)",
                            EXPECTED[name]["contains"])
        return
    r = corpus_server.post("/v1/sweeps", json={"dataset": up.json()["id"],
                                               "settings": SETTINGS, "data": data})
    assert_client_error(r, f"{name} (sweep with data {data})", EXPECTED[name]["contains"])


@pytest.mark.parametrize("name", cases("limit"))
def test_over_a_row_or_column_limit_is_a_named_client_error(start_server, name):
    """With the server's --max-rows / --max-columns set as the case says, the upload gets a
    4xx naming the limit."""
    options = EXPECTED[name]["options"]
    args = []
    if "max_rows" in options:
        args += ["--max-rows", str(options["max_rows"])]
    if "max_columns" in options:
        args += ["--max-columns", str(options["max_columns"])]
    server = start_server(args=args)
    assert_client_error(post_file(server, name), name, EXPECTED[name]["contains"])


def test_server_still_serves_after_the_whole_corpus(corpus_server, iris_csv):
    """After every malformed file has been posted (the tests above ran first on this same
    server; this one posts them all again to stand alone), /readyz answers and a good upload
    still works."""
    for name in EXPECTED:
        r = post_file(corpus_server, name)
        assert r.status_code < 500, f"{name}: {r.status_code} {r.text}"
    still_serving(corpus_server, iris_csv)
