"""Click options generated from declared parameters, and the options every command shares.

No command writes its parameter options by hand: :func:`param_options` turns each
:class:`curvescan.declare.Param` into a click option with the declared flag, type, help,
unit and default, validated by the declaration itself.
"""

from __future__ import annotations

from typing import Any, Callable, Iterable

import click

from ..declare import Param
from ..errors import CurvescanError

__all__ = ["param_options", "output_opt", "overwrite_opt"]


def _callback(param: Param) -> Callable[[click.Context, click.Parameter, Any], Any]:
    def check(ctx: click.Context, option: click.Parameter, value: Any) -> Any:
        if value is None:
            return None
        try:
            return param.validate(value)
        except CurvescanError as exc:
            raise click.BadParameter(str(exc).split(": ", 1)[-1], ctx=ctx, param=option)
    return check


def _help(param: Param) -> str:
    text = param.help
    if param.unit and f"({param.unit})" not in text and param.kind in ("float", "int"):
        text += f" Unit: {param.unit}."
    if param.default is not None and param.kind != "bool":
        text += f" [default: {param.default}]"
    return text


def option_for(param: Param) -> Callable[[Callable], Callable]:
    """A click option for one declared parameter (default None: 'not given')."""
    names = [param.flag] + ([param.short] if param.short else [])
    kwargs: dict[str, Any] = {"default": None, "help": _help(param),
                              "callback": _callback(param), "show_default": False}
    if param.kind == "bool":
        names = [f"{param.flag}/--no-{param.flag[2:]}"]
        kwargs.update(default=None, help=param.help + f" [default: {'on' if param.default else 'off'}]")
    elif param.kind == "float":
        kwargs["type"] = click.FLOAT
        kwargs["metavar"] = param.unit.upper().replace("/", "") if param.unit else "NUMBER"
    elif param.kind == "int":
        kwargs["type"] = click.INT
    elif param.kind == "choice":
        kwargs["type"] = click.Choice(param.choices, case_sensitive=False)
    elif param.kind == "field":
        kwargs["metavar"] = "FIELD"
    elif param.kind == "crs":
        kwargs["metavar"] = "CRS"
    elif param.kind == "path":
        kwargs["type"] = click.Path(dir_okay=False)
    return click.option(*names, param.name, **kwargs)


def param_options(params: Iterable[Param]) -> Callable[[Callable], Callable]:
    """Decorator adding one option per declared parameter, in declaration order."""
    params = tuple(params)

    def deco(fn: Callable) -> Callable:
        for p in reversed(params):
            fn = option_for(p)(fn)
        return fn
    return deco


output_opt = click.option("-o", "--output", type=click.Path(dir_okay=False),
                          help="Output GeoPackage.")
overwrite_opt = click.option("--overwrite", is_flag=True, default=False,
                             help="Replace the output if it exists.")


def given(values: dict[str, Any], params: Iterable[Param]) -> dict[str, Any]:
    """The declared parameters the user actually set."""
    names = {p.name for p in params}
    return {k: v for k, v in values.items() if k in names and v is not None}
