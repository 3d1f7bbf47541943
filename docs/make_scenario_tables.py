"""Regenerate the key tables of docs/scenario.md from the scenario schema (and its defaults table).

Usage::

    python docs/make_scenario_tables.py          # rewrite the tables in place
    python docs/make_scenario_tables.py --check  # exit 1 if the file is out of date

Each table follows its section heading (### `[rays]`, ### `[[source.segment]]` ...); only the
table is replaced, the prose around it is kept. tests/io/test_scenario.py checks the same.
"""

from __future__ import annotations

import pathlib
import re
import sys

from tsunamifocus.io.scenario import scenario_schema, scenario_table_markdown

DOC = pathlib.Path(__file__).resolve().parent / "scenario.md"


def regenerate(text: str) -> str:
    """``text`` with every section's table replaced by the generated one."""
    for sec in scenario_schema():
        heading = re.compile(r"^### `\[{1,2}" + re.escape(sec) + r"\]{1,2}`\n\n((?:\|.*\n)+)", re.M)
        m = heading.search(text)
        if m is None:
            raise SystemExit(f"{DOC}: no table under a heading for [{sec}]")
        text = text[: m.start(1)] + scenario_table_markdown(sec) + "\n" + text[m.end(1):]
    return text


def main() -> int:
    old = DOC.read_text(encoding="utf-8")
    new = regenerate(old)
    if "--check" in sys.argv[1:]:
        if new != old:
            print(f"{DOC}: tables out of date; run python docs/make_scenario_tables.py", file=sys.stderr)
            return 1
        return 0
    if new != old:
        DOC.write_text(new, encoding="utf-8")
    return 0


if __name__ == "__main__":
    sys.exit(main())
