"""The ``quantize`` command line: a thin layer over the library.

Each command parses its options, calls the library and prints a summary.
Errors a user can cause become one line on stderr and exit code 1 (2 for bad
usage, from click); ``--debug`` shows the traceback instead.  Only click is
imported at start-up so that ``quantize --help`` answers at once.
"""

from __future__ import annotations

import warnings

import click

from quantize import __version__

from .apply import apply
from .batch import batch
from .fit import fit
from .reduce import reduce
from .separate import separate
from .sweep import sweep


def _stop_on_terminate(ctx: click.Context) -> None:
    """Treat SIGTERM (a job scheduler, ``kill``) as Ctrl-C.

    Python's default for SIGTERM ends the process on the spot, which can
    leave a temporary ``.part`` file beside an output being written.  As an
    interrupt, the atomic writers remove it and the run stops with one line.
    """
    import signal

    def interrupt(signum, frame):
        raise KeyboardInterrupt

    try:
        saved = signal.signal(signal.SIGTERM, interrupt)
    except (ValueError, AttributeError):  # not the main thread, or no SIGTERM here
        return
    ctx.call_on_close(lambda: signal.signal(signal.SIGTERM, saved))


def _warning_line(message, category, filename, lineno, line=None) -> str:
    """Warnings as one line, like errors, without the source line Python adds."""
    text = (str(message).splitlines() or [category.__name__])[0]
    return f"quantize: warning: {text}\n"


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.option("--debug", is_flag=True, help="Show full tracebacks on errors.")
@click.version_option(version=__version__, prog_name="quantize")
@click.pass_context
def main(ctx, debug):
    """Reduce images to a small, fixed palette of colours in a perceptual space,
    and report the CIEDE2000 (ΔE00) error of each reduction.

    ΔE figures are computed from file data on an assumed sRGB display; they are
    not measurements of a print. Proof physically before a production run.
    """
    ctx.ensure_object(dict)
    ctx.obj["debug"] = debug
    _stop_on_terminate(ctx)
    if not debug:
        saved = warnings.formatwarning
        warnings.formatwarning = _warning_line
        ctx.call_on_close(lambda: setattr(warnings, "formatwarning", saved))



for _command in (reduce, fit, apply, sweep, batch, separate):
    main.add_command(_command)


if __name__ == "__main__":  # pragma: no cover
    main()
