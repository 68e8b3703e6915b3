"""Arguments several subcommands share: the sweep definition, the result store and output selection."""

from __future__ import annotations

#: Help of the ``STORE`` argument of the commands that read a finished (or partial) result store.
RESULT_STORE_HELP = "result store (folder written by `sweep run`)"


def add_spec_argument(parser) -> None:
    """The positional ``SPEC``: a sweep definition (TOML)."""
    parser.add_argument("spec", metavar="SPEC", help="sweep definition (TOML)")


def add_result_store_argument(parser) -> None:
    """The positional ``store`` of ``sweep summary``, ``sensitivity`` and ``report``."""
    parser.add_argument("store", help=RESULT_STORE_HELP)


def add_output_selection(parser) -> None:
    """``--json``, ``--variables`` and ``--all``: which outputs a reading command prints, and how."""
    parser.add_argument("--json", action="store_true",
                        help="print a JSON list of records instead of tables")
    parser.add_argument("--variables", default=None,
                        help="comma-separated outputs (default: the headline yield in tables, "
                             "every output in JSON)")
    parser.add_argument("--all", action="store_true", help="tables of every output")


def selected_variables(args, names: list[str], headline: list[str]) -> list[str]:
    """The outputs chosen by :func:`add_output_selection`'s flags.

    Parameters
    ----------
    args : argparse.Namespace
        Parsed arguments (``variables``, ``json``, ``all``).
    names : list of str
        Every output of the store, headline first.
    headline : list of str
        The outputs shown in tables by default.
    """
    if args.variables:
        return [v.strip() for v in args.variables.split(",") if v.strip()]
    if args.json or args.all:
        return names
    return headline
