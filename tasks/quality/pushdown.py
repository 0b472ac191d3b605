"""The suite's column rules evaluated in DuckDB, in one pass over the load (quality.engine = "duckdb").

The expectation suite stays the one definition of every rule. A rule whose type and arguments have a
plain SQL reading is translated here into a predicate, "this record is unexpected", with the meaning GX
gives it (GX Core 1.x, pandas engine):

- expect_column_values_to_not_be_null: unexpected when null;
- expect_column_values_to_be_null: unexpected when not null;
- expect_column_values_to_match_regex: a non-null text value is unexpected when the pattern is found
  nowhere in it (search, not full match: GX's pandas engine uses `str.contains`); DuckDB's RE2 differs
  from Python's `re` in one way that matters here: `$` does not match before a trailing line feed, so a
  value ending in a line feed breaks an anchored pattern here and passed it under GX (that value also
  breaks text_control_characters, so the record is quarantined either way);
- expect_column_values_to_be_in_set: a non-null value not in the set;
- expect_column_values_to_be_between: a non-null value below the minimum or above the maximum
  (strict_min / strict_max exclude the bound);
- expect_column_values_to_be_unique: a non-null value that occurs more than once in the load (every
  occurrence, as GX marks them).

Nulls are "missing" (skipped) for all but the two null rules, as in GX. `mostly` is honoured. Any other
argument (row_condition, parse_strings_as_datetimes, ...), or a pattern on a column that is not text,
leaves the rule to GX. The equivalence with GX is tested on the whole bad-input catalogue
(tests/integration/test_bad_inputs.py).

Two header rules are read here too (`header_result`), so that ingest need not import GX (about 6 s) for
a file's first line: expect_table_columns_to_match_set (GX's pandas `_validate`: observed and mismatched
names sorted, `unexpected` allowed unless exact_match, which defaults to true) and
expect_table_column_count_to_equal. Tested against GX on every header case
(tests/unit/test_header_rules.py).
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Any

import duckdb

PUSHED_TYPES = frozenset(
    {
        "expect_column_values_to_not_be_null",
        "expect_column_values_to_be_null",
        "expect_column_values_to_match_regex",
        "expect_column_values_to_be_in_set",
        "expect_column_values_to_be_between",
        "expect_column_values_to_be_unique",
    }
)
_ARGUMENTS = frozenset(
    {"column", "value_set", "regex", "min_value", "max_value", "strict_min", "strict_max", "mostly"}
)
_NULL_RULES = frozenset({"expect_column_values_to_not_be_null", "expect_column_values_to_be_null"})
_IDENTIFIER = re.compile(r"^[a-z_][a-z0-9_]*$")


def _value(arg: Any, params: dict) -> Any:
    """An argument's value: a literal, or an expectation parameter ({"$PARAMETER": name})."""
    if isinstance(arg, dict) and "$PARAMETER" in arg:
        return params[arg["$PARAMETER"]]
    return arg


def translatable(exp: dict, column_types: dict[str, str]) -> bool:
    """Can this rule be evaluated as a predicate here (else GX evaluates it)?"""
    kwargs = exp.get("kwargs", {})
    column = kwargs.get("column")
    if exp.get("type") not in PUSHED_TYPES or not set(kwargs) <= _ARGUMENTS:
        return False
    if not isinstance(column, str) or not _IDENTIFIER.match(column) or column not in column_types:
        return False
    if exp["type"] == "expect_column_values_to_match_regex" and column_types[column] != "VARCHAR":
        return False  # GX would match the str() of the value; DuckDB's cast to text writes it differently
    return True


HEADER_TYPES = frozenset({"expect_table_columns_to_match_set", "expect_table_column_count_to_equal"})


def header_result(exp: dict, columns: list[str]) -> dict | None:
    """A header rule's outcome in GX's result shape ({"success", "result"}), or None to leave it to GX."""
    kind, kwargs = exp.get("type"), exp.get("kwargs", {})
    if kind == "expect_table_column_count_to_equal" and set(kwargs) == {"value"}:
        return {"success": len(columns) == kwargs["value"], "result": {"observed_value": len(columns)}}
    if kind != "expect_table_columns_to_match_set" or not set(kwargs) <= {"column_set", "exact_match"}:
        return None
    if not isinstance(kwargs.get("column_set"), list):
        return None
    expected, found = set(kwargs["column_set"]), set(columns)
    observed = sorted(found)
    if expected == found:
        return {"success": True, "result": {"observed_value": observed}}
    mismatched = {}
    if found - expected:
        mismatched["unexpected"] = sorted(found - expected)
    if expected - found:
        mismatched["missing"] = sorted(expected - found)
    exact = kwargs.get("exact_match", True) is not False
    return {
        "success": not exact and "missing" not in mismatched,
        "result": {"observed_value": observed, "details": {"mismatched": mismatched}},
    }


@dataclass(frozen=True)
class Predicate:
    unexpected: str  # SQL, true when the record breaks the rule
    missing: str  # SQL, true when the record is skipped by the rule (null)
    binds: dict[str, Any]
    key: str | None = None  # a uniqueness rule's column: `unexpected` then reads `evaluate`'s repeated_i


def predicate(exp: dict, index: int, params: dict) -> Predicate:
    """The rule as SQL over a relation that has its column (the column name is checked by `translatable`)."""
    kind, kwargs = exp["type"], exp["kwargs"]
    col = f'"{kwargs["column"]}"'
    binds: dict[str, Any] = {}
    missing = "false" if kind in _NULL_RULES else f"{col} is null"
    if kind == "expect_column_values_to_not_be_null":
        test = f"{col} is null"
    elif kind == "expect_column_values_to_be_null":
        test = f"{col} is not null"
    elif kind == "expect_column_values_to_match_regex":
        binds[f"regex_{index}"] = kwargs["regex"]
        test = f"{col} is not null and not regexp_matches({col}, $regex_{index})"
    elif kind == "expect_column_values_to_be_in_set":
        binds[f"set_{index}"] = list(_value(kwargs["value_set"], params))
        test = f"{col} is not null and not list_contains($set_{index}, {col})"
    elif kind == "expect_column_values_to_be_between":
        low, high = _value(kwargs.get("min_value"), params), _value(kwargs.get("max_value"), params)
        outside = []
        if low is not None:
            binds[f"min_{index}"] = low
            outside.append(f"{col} {'<=' if kwargs.get('strict_min') else '<'} $min_{index}")
        if high is not None:
            binds[f"max_{index}"] = high
            outside.append(f"{col} {'>=' if kwargs.get('strict_max') else '>'} $max_{index}")
        test = f"{col} is not null and ({' or '.join(outside) or 'false'})"
    elif kind == "expect_column_values_to_be_unique":
        # Read over the whole load: a window here would sort every record with all its flags by this
        # column (at 33M records a tenth of validation). `evaluate` keeps the column, groups it alone
        # into repeated_<index> (the non-null values held more than once) and joins that back.
        return Predicate(f"repeated_{index}.v is not null", missing, binds, key=col)
    else:  # pragma: no cover - translatable() admits only the types above
        raise ValueError(kind)
    return Predicate(test, missing, binds)


@dataclass
class RuleOutcome:
    """One rule's figures over the load, in the shape of GX's result."""

    element_count: int
    missing_count: int
    unexpected_count: int
    lines: list[int]  # the first unexpected records' line numbers, in line order

    def success(self, mostly: float | None) -> bool:
        if mostly is None:
            return self.unexpected_count == 0
        checked = self.element_count - self.missing_count
        return checked == 0 or (checked - self.unexpected_count) / checked >= mostly


def evaluate(
    con: duckdb.DuckDBPyConnection,
    query: str,
    query_params: dict,
    rules: list[dict],
    exp_params: dict,
    keep_lines: int,
    carry: tuple[str, ...] = (),
) -> tuple[list[RuleOutcome], dict[int, list[int]], dict[int, dict[str, Any]]]:
    """Evaluate `rules` over the records of `query` in one pass.

    Returns each rule's outcome; for every record that breaks any rule, its line and the indexes of the
    rules it breaks; and for those records the `carry` columns (helpers a reason needs).
    """
    predicates = [predicate(exp, i, exp_params) for i, exp in enumerate(rules)]
    binds = {k: v for p in predicates for k, v in p.binds.items()}
    # A uniqueness rule keeps its column (k<i>); its flag is a join with the values held more than once.
    keyed = [i for i, p in enumerate(predicates) if p.key]
    flags = ", ".join(
        (f"{p.key} as k{i}" if p.key else f"({p.unexpected}) as u{i}") + f", ({p.missing}) as m{i}"
        for i, p in enumerate(predicates)
    )
    carried = "".join(f', "{c}"' for c in carry)
    checks = "rule_checks"
    if keyed:
        repeated = ", ".join(f"({predicates[i].unexpected}) as u{i}" for i in keyed)
        joins = " ".join(f"left join repeated_{i} on repeated_{i}.v = rule_checks.k{i}" for i in keyed)
        checks = f"(select rule_checks.*, {repeated} from rule_checks {joins}) as rule_checks"
    n = len(rules)
    # Generated column names (u0.., m0.., k0.., repeated_0..) only; every value is bound.
    tallies = ", ".join(f"count(*) filter (where m{i}), count(*) filter (where u{i})" for i in range(n))
    marks = ", ".join(f"u{i}" for i in range(n))
    broken_any = " or ".join(f"u{i}" for i in range(n)) or "false"
    try:
        con.execute(
            # The query is a packaged file's text (header comments included): it starts and ends on
            # lines of its own, so its last line cannot comment out the closing parenthesis.
            f"create or replace temp table rule_checks as select source_line{carried}, {flags} "
            f"from (\n{query}\n) as checked",
            {**query_params, **binds},
        ).fetchall()
        for i in keyed:
            con.execute(
                f"create or replace temp table repeated_{i} as select k{i} as v from rule_checks "
                f"where k{i} is not null group by k{i} having count(*) > 1"
            ).fetchall()
        counts = con.execute(f"select count(*), {tallies} from {checks}").fetchall()[0]
        rows = con.execute(
            f"select source_line{carried}, {marks} from {checks} where {broken_any} order by source_line"
        ).fetchall()
    finally:
        for i in keyed:
            con.execute(f"drop table if exists repeated_{i}")
        con.execute("drop table if exists rule_checks")
    total = int(counts[0])
    outcomes = [
        RuleOutcome(total, int(counts[1 + 2 * i]), int(counts[2 + 2 * i]), []) for i in range(len(rules))
    ]
    broken: dict[int, list[int]] = {}
    helpers: dict[int, dict[str, Any]] = {}
    for row in rows:
        line, values, marks = int(row[0]), row[1 : 1 + len(carry)], row[1 + len(carry) :]
        hit = [i for i, mark in enumerate(marks) if mark]
        broken[line] = hit
        helpers[line] = dict(zip(carry, values, strict=True))
        for i in hit:
            if len(outcomes[i].lines) < keep_lines:
                outcomes[i].lines.append(line)
    return outcomes, broken, helpers
