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
        raise _Terminated

    try:
        saved = signal.signal(signal.SIGTERM, interrupt)
    except (ValueError, AttributeError):  # not the main thread, or no SIGTERM here
        return
    ctx.call_on_close(lambda: signal.signal(signal.SIGTERM, saved))


class _Terminated(KeyboardInterrupt):
    """SIGTERM, raised as an interrupt so that the same clean-up runs."""


class _Commands(click.Group):
    """The command group: an interrupt ends the run with one line and the shell's exit code.

    Ctrl-C exits 130 and SIGTERM 143 (128 + the signal's number, as shells report them), after the
    atomic writers have removed their temporary files; never a traceback.
    """

    def invoke(self, ctx: click.Context):
        try:
            return super().invoke(ctx)
        except BrokenPipeError:
            # The reader stopped reading (`| head`): the outputs are written and the summary is not wanted.
            # Standard output goes to the null device so that closing it at exit raises nothing more.
            import os
            import sys

            null = os.open(os.devnull, os.O_WRONLY)
            os.dup2(null, sys.stdout.fileno())
            os.close(null)
            ctx.exit(0)
        except OSError as exc:  # the work's own file errors are reported by the command; this is the summary's
            if exc.filename is None:
                click.echo(f"quantize: error: cannot write the summary to standard output ({exc.strerror or exc}); "
                           "the output files are written", err=True)
            else:
                click.echo(f"quantize: error: {exc.filename}: {exc.strerror or exc}", err=True)
            ctx.exit(1)
        except KeyboardInterrupt as exc:
            terminated = isinstance(exc, _Terminated)
            click.echo(f"quantize: {'terminated' if terminated else 'interrupted'}; nothing half-written is left",
                       err=True)
            ctx.exit(143 if terminated else 130)


def _log_to_stderr(ctx: click.Context, verbose: int) -> None:
    """Send the library's log records (logger ``quantize``) to stderr at the level -v asks for.

    The library only creates loggers; the command line, which owns this process, attaches the
    handler, and removes it when the command ends. Warnings stay with :mod:`warnings`, printed once.
    """
    import logging

    if not verbose:
        return
    logger = logging.getLogger("quantize")
    handler = logging.StreamHandler()
    handler.setFormatter(logging.Formatter("quantize: %(message)s"))
    saved = logger.level
    logger.addHandler(handler)
    logger.setLevel(logging.INFO if verbose == 1 else logging.DEBUG)

    def restore():
        logger.removeHandler(handler)
        logger.setLevel(saved)

    ctx.call_on_close(restore)


def _names_in_any_bytes(ctx: click.Context) -> None:
    """Print file names whose bytes are not UTF-8 instead of failing on them.

    Python reads such a name as lone surrogates (PEP 383); a strict stream cannot encode them.
    The ``surrogateescape`` handler writes the name's own bytes back, as Python does in the POSIX
    locale. Only strict streams are changed, and each is restored when the command ends.
    """
    import sys

    for stream in (sys.stdout, sys.stderr):
        if getattr(stream, "errors", None) == "strict" and hasattr(stream, "reconfigure"):
            stream.reconfigure(errors="surrogateescape")
            ctx.call_on_close(lambda s=stream: s.reconfigure(errors="strict"))


def _warning_line(message, category, filename, lineno, line=None) -> str:
    """Warnings as one line, like errors, without the source line Python adds."""
    text = (str(message).splitlines() or [category.__name__])[0]
    return f"quantize: warning: {text}\n"


@click.group(cls=_Commands, context_settings={"help_option_names": ["-h", "--help"]})
@click.option("--debug", is_flag=True, help="Show full tracebacks on errors.")
@click.option("--color", "--colour", "colour", type=click.Choice(["auto", "always", "never"]), default="auto",
              show_default=True, help="Colour swatches in the terminal; auto: only on a terminal, and never when "
                                      "the NO_COLOR environment variable is set.")
@click.option("-v", "--verbose", count=True,
              help="Say what is read, fitted and written (-vv: more), on stderr through Python's logging.")
@click.option("-q", "--quiet", is_flag=True,
              help="Print no summary: only errors and warnings (and --json output, when asked for).")
@click.version_option(version=__version__, prog_name="quantize")
@click.pass_context
def main(ctx, debug, colour, verbose, quiet):
    """Reduce images to a small, fixed palette of colours in a perceptual space,
    and report the CIEDE2000 (ΔE00) error of each reduction.

    ΔE figures are computed from file data on an assumed sRGB display; they are
    not measurements of a print. Proof physically before a production run.
    """
    ctx.ensure_object(dict)
    ctx.obj["debug"] = debug
    ctx.obj["colour"] = colour
    ctx.obj["quiet"] = quiet
    _log_to_stderr(ctx, verbose)
    _stop_on_terminate(ctx)
    _names_in_any_bytes(ctx)
    if not debug:
        saved = warnings.formatwarning
        warnings.formatwarning = _warning_line
        ctx.call_on_close(lambda: setattr(warnings, "formatwarning", saved))



for _command in (reduce, fit, apply, sweep, batch, separate):
    main.add_command(_command)


if __name__ == "__main__":  # pragma: no cover
    main()
