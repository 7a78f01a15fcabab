"""Former option names, still accepted (hidden from help) for one release.

Options that meant different things in different commands got distinct names.
The old spellings keep working: before a command parses its arguments, a former
name is replaced by the new one and a note says so on stderr. Giving both the
old and the new name of one option is refused. ``fieldplan plan``'s own former
names live in the plan specification (``aliases`` in :mod:`fieldplan.spec`).

Remove an entry here (and its note in the README) in the release after.
"""

from __future__ import annotations

from typing import Any

import typer

__all__ = ["FORMER_NAMES", "rewrite_args", "install"]

#: Per command: former flag -> current flag.
FORMER_NAMES: dict[str, dict[str, str]] = {
    "crews": {"--start": "--drop-off"},
    "schedule": {"--start": "--first-day"},
    "mark": {"--by": "--recorded-by", "--from": "--ids-file"},
    "results": {"--by": "--recorded-by", "--value": "--variable"},
    "estimate": {"--by": "--group-by", "--value": "--variable"},
    "size": {"--from": "--from-plan", "--value": "--variable"},
    "labels": {"--layout": "--label-sheet"},
}


def rewrite_args(command: str, args: list[str]) -> tuple[list[str], list[str]]:
    """``args`` with former flags of ``command`` replaced, and one note per former flag used.

    Raises
    ------
    fieldplan.errors.OptionError
        When a former name and its new name are both given.
    """
    from fieldplan.errors import OptionError

    renames = FORMER_NAMES.get(command, {})
    if not renames:
        return list(args), []
    out: list[str] = []
    notes: list[str] = []
    used_new = {a.split("=", 1)[0] for a in args if a.split("=", 1)[0] in renames.values()}
    options_done = False
    for arg in args:
        if arg == "--":
            options_done = True
        flag, sep, rest = arg.partition("=")
        if not options_done and flag in renames:
            new = renames[flag]
            if new in used_new:
                raise OptionError(f"give {new} only ({flag} is its former name)")
            note = f"note: {command} {flag} is now {new}; the former name goes in the next release"
            if note not in notes:
                notes.append(note)
            arg = new + sep + rest
        out.append(arg)
    return out, notes


class RenamingCommand(typer.core.TyperCommand):
    """A command that accepts its former option names (see :data:`FORMER_NAMES`)."""

    def parse_args(self, ctx: Any, args: list[str]) -> list[str]:
        from fieldplan.cli.options import echo_err
        from fieldplan.errors import OptionError

        try:
            args, notes = rewrite_args(self.name or "", args)
        except OptionError as err:
            raise typer.BadParameter(str(err)) from None
        for note in notes:
            echo_err(note)
        return super().parse_args(ctx, args)


def install(app: typer.Typer) -> None:
    """Give every registered command of ``app`` with former names the renaming command class."""
    for info in app.registered_commands:
        if info.name in FORMER_NAMES and info.cls in (None, typer.core.TyperCommand):
            info.cls = RenamingCommand
