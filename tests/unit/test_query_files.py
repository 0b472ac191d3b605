"""The query files (`warehouse/sql/queries/<area>/<name>.sql`): each says what it is, and each is used.

A header that lists parameters the statement no longer takes, or misses a table it reads, misleads the
next reader as surely as a wrong comment in code; a file no module runs is dead SQL that still looks
maintained. The loader's own rules (only used parameters bound, a missing one named) are tested here too.
"""

from __future__ import annotations

import ast
import re
from pathlib import Path

import pytest

from ledgerband.tasks.core import queries
from ledgerband.tasks.core.errors import LedgerbandError

ROOT = Path(__file__).parents[2]
QUERIES = ROOT / "warehouse" / "sql" / "queries"
LOADERS = {"run_query": 1, "query_relation": 1, "query_text": 0, "bind": 0}  # name -> index of `area`
_RELATION = re.compile(
    r"\b((?:raw|quarantine|ops|ref|staging|intermediate|features|ml|published|temp)\.[a-z_]+)\b(?!\s*\()"
)
_WRITES = re.compile(r"^\s*(insert|update|delete|create)\b", re.IGNORECASE)


def _files() -> list[Path]:
    return sorted(QUERIES.glob("*/*.sql"))


def _header(text: str) -> list[str]:
    """The comment lines the file opens with."""
    lines = []
    for line in text.splitlines():
        if not line.startswith("--"):
            break
        lines.append(line)
    return lines


def _field(header: list[str], name: str) -> str | None:
    """A header field's text, continued on the following `-- ` lines until one ends with a period."""
    for i, line in enumerate(header):
        match = re.match(rf"^--\s*{name}:\s*(.*)$", line)
        if match:
            text = match.group(1)
            for following in header[i + 1 :]:
                if text.rstrip().endswith(".") or re.match(r"^--\s*[A-Z][a-z]+:", following):
                    break
                text += " " + following[2:].strip()
            return text
    return None


def _body(text: str) -> str:
    return "\n".join(line.split("--", 1)[0] for line in text.splitlines() if not line.startswith("--"))


def _used() -> dict[tuple[str, str], list[str]]:
    """(area, name) -> where in tasks/ and flows/ a loader is called with it (literal arguments)."""
    found: dict[tuple[str, str], list[str]] = {}
    for path in sorted([*ROOT.joinpath("tasks").rglob("*.py"), *ROOT.joinpath("flows").rglob("*.py")]):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if not isinstance(node, ast.Call):
                continue
            func = node.func
            called = func.attr if isinstance(func, ast.Attribute) else getattr(func, "id", None)
            if called not in LOADERS:
                continue
            args = node.args[LOADERS[called] : LOADERS[called] + 2]
            if len(args) == 2 and all(isinstance(a, ast.Constant) and isinstance(a.value, str) for a in args):
                key = (args[0].value, args[1].value)
                found.setdefault(key, []).append(f"{path.relative_to(ROOT)}:{node.lineno}")
    return found


def test_the_query_files_exist_and_live_only_in_area_folders():
    assert _files(), "no query files found: the glob or the folder moved"
    stray = [p for p in QUERIES.rglob("*.sql") if p.parent.parent != QUERIES]
    assert not stray, f"query files must be sql/queries/<area>/<name>.sql: {stray}"


@pytest.mark.parametrize("path", _files(), ids=lambda p: f"{p.parent.name}/{p.stem}")
def test_every_query_file_opens_with_the_house_header(path):
    text = path.read_text(encoding="utf-8")
    header = _header(text)
    assert header and not re.match(r"^--\s*[A-Z][a-z]+:", header[0]), (
        f"{path.name}: the header's first line says what the statement returns or does"
    )
    assert _field(header, "Grain"), f"{path.name}: no '-- Grain: ...' line"
    assert any(re.search(r"\bKey:", line) for line in header), f"{path.name}: no 'Key: ...'"
    reads = _field(header, "Reads")
    assert reads and reads.rstrip().endswith("."), (
        f"{path.name}: '-- Reads: ...' must be there and end with '.'"
    )
    declared = set(_RELATION.findall(reads))
    writes = _field(header, "Writes")
    statement = _body(text).strip()
    if _WRITES.match(statement):
        assert writes and writes.rstrip().endswith("."), f"{path.name} writes: '-- Writes: ...' must say what"
    if writes:
        declared |= set(_RELATION.findall(writes))
    named = set(_RELATION.findall(_body(text)))
    assert named <= declared, f"{path.name} names {sorted(named - declared)} without declaring it"

    used = queries.parameters(text)
    listed = _field(header, "Parameters")
    if used:
        assert listed and listed.rstrip().endswith("."), f"{path.name}: '-- Parameters: $a, $b.' missing"
        assert set(re.findall(r"\$([A-Za-z_]\w*)", listed)) == set(used), (
            f"{path.name}: Parameters lists {listed!r}, the statement uses {sorted(used)}"
        )
    else:
        assert listed is None, f"{path.name} takes no parameters but its header lists {listed!r}"


def test_every_query_file_is_run_by_some_module_and_every_one_named_exists():
    used = _used()
    files = {(p.parent.name, p.stem) for p in _files()}
    orphans = sorted(files - set(used))
    assert not orphans, f"query files no module runs (delete them or call them): {orphans}"
    missing = {key: where for key, where in used.items() if key not in files}
    assert not missing, f"modules name query files that do not exist: {missing}"


def test_parameters_ignore_comments_and_text_literals():
    text = (
        "-- Parameters: $in_a_comment.\nselect '$in_text', 'it''s $quoted' as x, $real -- $trailing\nfrom t"
    )
    assert queries.parameters(text) == {"real"}


def test_bind_keeps_only_the_parameters_the_file_uses():
    # DuckDB refuses a named parameter the statement does not use: extra values must not reach it.
    assert queries.bind("ingest", "load_totals", {"load_id": "L1", "run_id": "R"}) == {"load_id": "L1"}


def test_an_unbound_parameter_is_named_with_its_file():
    with pytest.raises(LedgerbandError, match=r"ingest/load_totals\.sql uses \$load_id"):
        queries.bind("ingest", "load_totals", {"run_id": "R"})


def test_a_missing_query_file_is_a_clear_error():
    with pytest.raises(LedgerbandError, match=r"no query file sql/queries/ingest/no_such_query\.sql"):
        queries.query_text("ingest", "no_such_query")
