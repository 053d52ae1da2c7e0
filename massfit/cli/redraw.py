"""``massfit redraw``: the figures and tables of a saved result, drawn again."""

from __future__ import annotations

from pathlib import Path

from massfit.cli.status import EXIT_OK
from massfit.errors import ConfigError

__all__ = ["add_parser", "run"]


def add_parser(sub):
    from massfit.plot.catalogue import FIGURE_FUNCTIONS

    redraw = sub.add_parser(
        "redraw", help="draw the figures and tables of a saved result again",
        description="Redraw figures and tables from an output folder written by "
                    "'massfit fit', without refitting: the model is rebuilt from the "
                    "folder's own copy of the observations and its posterior samples.")
    redraw.add_argument("folder", metavar="DIR", help="a massfit output folder")
    redraw.add_argument("--figures", metavar="NAME,...", default=None,
                        help="figures to draw (default: those the fit writes), from: "
                             + ", ".join(FIGURE_FUNCTIONS))
    redraw.add_argument("--formats", metavar="EXT,...", default="png,pdf",
                        help="file formats (any matplotlib writes: png, pdf, svg, "
                             "eps...; default %(default)s)")
    redraw.add_argument("--to", metavar="DIR", help="write into DIR instead of the "
                        "result's folder")
    redraw.add_argument("--no-tables", action="store_true",
                        help="skip the LaTeX, Markdown and ECSV tables")



def run(args):
    import matplotlib
    from matplotlib.figure import Figure

    from massfit.plot.figures import FIGURES, applicable_figures
    from massfit.result.loading import load_result

    matplotlib.use("Agg")  # files only: no window, whatever the environment says
    formats = [f.strip().lower().lstrip(".") for f in args.formats.split(",") if f.strip()]
    supported = Figure().canvas.get_supported_filetypes()
    bad = [f for f in formats if f not in supported]
    if bad or not formats:
        raise ConfigError(f"cannot write {', '.join(bad) or 'no format'}; accepted: "
                          f"{', '.join(sorted(supported))}", key="--formats")
    figures = None
    if args.figures is not None:
        figures = [f.strip() for f in args.figures.split(",") if f.strip()]
        unknown = [f for f in figures if f not in FIGURES]
        if unknown or not figures:
            raise ConfigError(f"no figure called {', '.join(unknown) or '(none given)'}; "
                              f"accepted: {', '.join(FIGURES)}", key="--figures")
    result = load_result(args.folder)
    if figures is None:  # the ones the fit itself writes (corner_full only on request)
        figures = applicable_figures(result)
    out = Path(args.to) if args.to else Path(args.folder)
    out.mkdir(parents=True, exist_ok=True)
    written = result.write_figures(out, figures=figures, formats=formats)
    if not args.no_tables:
        written += result.write_tables(out)
    for path in written:
        print(path)
    return EXIT_OK

