"""Command-line interface (a leaf: it parses, calls the library and renders).

Commands live in small modules by theme; each registers itself on :data:`app`.
Exit codes: 0 success, 1 a judged rule failed, 2 bad input or usage.
"""

from __future__ import annotations

from typing import Annotated

import typer

from .._version import __version__
from ..report import CAUTION
from ._common import out

HELP = (
    "runup: critical speeds, amplification factors and damping from rotating-machinery "
    "startup and coastdown records (1X amplitude and phase versus speed).\n\n" + CAUTION
)

app = typer.Typer(
    help=HELP,
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    rich_markup_mode=None,
)


def _version(value: bool) -> None:
    if value:
        out.print(f"runup {__version__}")
        raise typer.Exit(0)


@app.callback()
def _main(
    version: Annotated[
        bool, typer.Option("--version", callback=_version, is_eager=True, help="Print the version and exit.")
    ] = False,
) -> None:
    """Top-level options."""


from . import archive as _archive  # noqa: E402,F401
from . import identify as _identify  # noqa: E402,F401  (registers its command)
from . import judge as _judge  # noqa: E402,F401
from . import output as _output  # noqa: E402,F401
from . import waveform as _waveform  # noqa: E402,F401

__all__ = ["app", "main"]


def main() -> None:
    """Console-script entry point."""
    app()
