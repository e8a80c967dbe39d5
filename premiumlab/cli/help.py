"""How `--help` names parameters: flags as bare flags and arguments in capitals.

Typer's help panel prints every option's type, so a boolean flag reads `--force <bool>` although it
takes no value, and its usage line writes a required argument as `{book}`. The command classes here
fix both once for every command: a flag gets an empty type label and an argument its name in
capitals (`BOOK`, or `[BOOK]` when it may be left out) unless it declares its own metavar.
"""

from __future__ import annotations

from typer import _click as click
from typer.core import TyperArgument, TyperCommand, TyperGroup, TyperOption


def name_parameters(params: list[click.Parameter]) -> list[click.Parameter]:
    """Give each flag an empty type label and each argument its name in capitals, in place.

    Parameters
    ----------
    params : list of click.Parameter
        A command's parameters, `--help` included.

    Returns
    -------
    list of click.Parameter
        The same list.
    """
    for param in params:
        if param.metavar is not None:
            continue
        if isinstance(param, TyperOption) and param.is_flag:
            param.metavar = ""
        elif isinstance(param, TyperArgument) and param.name:
            param.metavar = param.name.upper()
    return params


def _usage_piece(param: click.Parameter, ctx: click.Context) -> list[str]:
    if isinstance(param, TyperArgument):
        name = param.display_name_raw + ("..." if param.nargs != 1 else "")
        return [name if param.required else f"[{name}]"]
    return param.get_usage_pieces(ctx)


class NamedParamsCommand(TyperCommand):
    """A command whose help shows flags without a type and arguments in capitals."""

    def get_params(self, ctx: click.Context) -> list[click.Parameter]:
        return name_parameters(super().get_params(ctx))

    def collect_usage_pieces(self, ctx: click.Context) -> list[str]:
        pieces = [self.options_metavar] if self.options_metavar else []
        for param in self.get_params(ctx):
            pieces.extend(_usage_piece(param, ctx))
        return pieces


class NamedParamsGroup(TyperGroup):
    """The command group with the same help naming as `NamedParamsCommand`."""

    def get_params(self, ctx: click.Context) -> list[click.Parameter]:
        return name_parameters(super().get_params(ctx))
