"""What the commands that read a sample table or a batch output folder
(``regress``, ``grains``, ``population``) share: their sub-parser with the
positional sample argument, the output and figure options, the figure
function handed to the analysis and the middle value their summaries
print.  Errors are not handled here: they reach :func:`edgefit.cli.main`,
which prints one line and exits with status 2."""
from __future__ import annotations

from typing import Callable, Sequence

__all__ = ["sample_parser", "add_output_options", "figures_of", "middle"]


def sample_parser(subparsers, name: str, doc: str, *, help: str, sample_help: str,
                  metavar: str = "SAMPLE"):
    """Register sub-command ``name`` (its description: the first paragraph
    of the module docstring ``doc``) with the positional argument
    ``args.sample``, a sample table or a batch output folder."""
    p = subparsers.add_parser(name, help=help, description=doc.split("\n\n")[0])
    p.add_argument("sample", metavar=metavar, help=sample_help)
    return p


def add_output_options(p, *, output_help: str | None = None,
                       plots_help: str = "do not draw figures") -> None:
    """``-o/--output DIR`` and ``--no-plots``."""
    p.add_argument("-o", "--output", metavar="DIR", help=output_help)
    p.add_argument("--no-plots", action="store_true", help=plots_help)


def figures_of(args, save: Callable) -> Callable | None:
    """The plotting layer's figure function ``save``, or None with
    ``--no-plots``."""
    return None if args.no_plots else save


def middle(values: Sequence[float]) -> float:
    """The middle value of ``values`` (the upper one of the two middle
    values of an even count), as the summaries print it."""
    return sorted(values)[len(values) // 2]

