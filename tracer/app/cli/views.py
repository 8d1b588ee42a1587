"""Commands whose result holds several tables (trace, drift): which tables ``--show`` prints.

The rule, the same for both: ``--show NAME`` (repeatable) prints those tables in any format;
without it the terminal shows the command's default view, JSON the whole result as one object,
and CSV, which holds one table, the command's main table.
"""

from __future__ import annotations

from typing import Callable

import click


def show_option(tables: list[str], default: list[str], main: str, extra: str = ""):
    names = ", ".join(default)
    return click.option(
        "--show", multiple=True, type=click.Choice(tables + ["all"]),
        help=f"Tables to print (repeatable; default: {names}{extra}; all: every table). "
             f"Without --show, JSON gives every table and CSV the {main} table.")


def chosen_tables(show: tuple[str, ...], tables: list[str], default: list[str], main: str, fmt: str) -> list[str]:
    """The table names to print, in the command's order."""
    from tracer.errors import SettingError
    if "all" in show:
        names = list(tables)
    elif show:
        names = [t for t in tables if t in show]
    else:
        return list(default) if fmt == "table" else [main]
    if fmt == "csv" and len(names) > 1:
        raise SettingError(f"CSV holds one table; give one --show (one of {', '.join(tables)})")
    return names


def emit(out, show: tuple[str, ...], *, tables: list[str], default: list[str], main: str,
         get: Callable[[str], object], document: Callable[[], dict], text: Callable[[list[str]], str]) -> None:
    """Print the result: ``get(name)`` gives one table as a DataFrame, ``document()`` the whole
    result for JSON, ``text(names)`` the terminal view of the named tables."""
    from tracer.app.output import to_records
    if out.fmt == "json" and not show:
        out.document(document())
        return
    names = chosen_tables(show, tables, default, main, out.fmt)
    if out.fmt == "table":
        out.write(text(names))
    elif len(names) == 1:
        out.table(get(names[0]))
    else:
        out.document({name: to_records(get(name)) for name in names})
