"""Fuzzing the loader: byte-level damage to a valid extract never ends in a traceback or a lost record.

Hypothesis mutates the bytes of the good fixture (flip, insert, delete, duplicate a span; quotes,
separators, line breaks, NUL and non-UTF-8 bytes are favoured, as real damage has them) and the manifest is
re-issued for the damaged bytes, as a sender that computed it after the damage would. Every outcome must
be one of: a specific refusal (ExtractError or GateStopped, naming the file), or a load where every record
read is either loaded or quarantined. 200 examples by default; the `nightly` profile runs 5,000:
`HYPOTHESIS_PROFILE=nightly make test`.
"""

from __future__ import annotations

import hashlib
import json
import os
from pathlib import Path

import duckdb
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from ledgerband.tasks.core.context import RunContext
from ledgerband.tasks.core.errors import ExtractError, GateStopped
from ledgerband.tasks.core.warehouse import apply_schema
from ledgerband.tasks.ingest.extracts import load_extract
from ledgerband.tasks.ingest.manifest import read_manifest

GOOD = Path(__file__).parents[1] / "fixtures" / "ledger_good" / "2026-10"
ORIGINAL = (GOOD / "ledger-2026-10.csv").read_bytes()
MANIFEST = json.loads((GOOD / "ledger-2026-10.manifest.json").read_text())

settings.register_profile("default_loader", max_examples=200, deadline=None)
settings.register_profile("nightly", max_examples=5000, deadline=None)
PROFILE = "nightly" if os.environ.get("HYPOTHESIS_PROFILE") == "nightly" else "default_loader"

SPECIAL = st.sampled_from(
    [b",", b'"', b"\n", b"\r\n", b"\x00", b"\xff", b"\xe9", b"\xef\xbb\xbf", b";", b"\t"]
)
BYTES = st.one_of(SPECIAL, st.binary(min_size=1, max_size=8))


@st.composite
def damaged(draw) -> bytes:
    data = bytearray(ORIGINAL)
    for _ in range(draw(st.integers(1, 4))):
        at = draw(st.integers(0, len(data)))
        kind = draw(st.sampled_from(["insert", "delete", "replace", "duplicate", "truncate"]))
        if kind == "insert":
            data[at:at] = draw(BYTES)
        elif kind == "delete":
            del data[at : at + draw(st.integers(1, 12))]
        elif kind == "replace":
            piece = draw(BYTES)
            data[at : at + len(piece)] = piece
        elif kind == "duplicate":
            span = bytes(data[at : at + draw(st.integers(1, 80))])
            data[at:at] = span
        else:
            del data[at:]
    return bytes(data)


@settings(
    settings.get_profile(PROFILE),
    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
)
@given(data=damaged(), count_rows=st.booleans())
def test_damaged_bytes_are_loaded_quarantined_or_refused(tmp_path, data, count_rows):
    folder = tmp_path / "landing" / "2026-10"
    folder.mkdir(parents=True, exist_ok=True)
    extract = folder / "ledger-2026-10.csv"
    extract.write_bytes(data)
    manifest = dict(MANIFEST, sha256=hashlib.sha256(data).hexdigest())
    if count_rows:  # a sender counting the damaged file's lines; otherwise the count of the original
        manifest["row_count"] = max(data.count(b"\n") - 1, 0)
    path = folder / "ledger-2026-10.manifest.json"
    path.write_text(json.dumps(manifest))
    con = duckdb.connect()
    apply_schema(con)
    try:
        load = load_extract(con, RunContext.create("2026-10", run_id="fuzz"), read_manifest(path))
    except (ExtractError, GateStopped) as refused:
        assert "ledger-2026-10" in str(refused)  # a refusal names the file
        event(f"refused: {type(refused).__name__}")
        # Whatever reached raw.* before the refusal is accounted for under its load, with the reason.
        in_raw = con.execute("select count(*) from raw.ledger_lines").fetchall()[0][0]
        registered = con.execute("select coalesce(sum(rows_loaded), 0) from ops.loads").fetchall()[0][0]
        assert in_raw == registered
        return
    finally:
        in_raw = con.execute("select count(*) from raw.ledger_lines").fetchall()[0][0]
        quarantined = con.execute("select count(*) from quarantine.ledger_lines").fetchall()[0][0]
        con.close()
    assert load.rows_in_file == in_raw + quarantined  # every record read: loaded or set aside
    event("loaded, some records quarantined" if quarantined else "loaded whole")
