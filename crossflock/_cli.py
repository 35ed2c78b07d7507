"""The ``crossflock`` command line.

Exit codes: 0 success; 1 a check or verdict failed; 2 bad input (config, file, usage);
3 numerical failure (divergence, last good state kept); 130 interrupted.
"""

from __future__ import annotations

import argparse
import sys
import warnings

from ._errors import CrossflockError

__all__ = ["main", "build_parser"]


class _Parser(argparse.ArgumentParser):
    """argparse with one-line errors and exit code 2."""

    def error(self, message):  # pragma: no cover - exercised through main()
        self.exit(2, f"crossflock: error: {message} (see `crossflock {self.prog.split()[-1]} -h`)\n"
                  if " " in self.prog else f"crossflock: error: {message}\n")


def _add_config(p, name="config", help_="scenario TOML file"):
    p.add_argument(name, help=help_)
    p.add_argument("--set", dest="overrides", action="append", default=[],
                   metavar="SECTION.KEY=VALUE",
                   help="override a config key (TOML value syntax); repeatable")


def _add_progress(p):
    p.add_argument("--progress", dest="progress", action="store_true", default=None,
                   help="always show a progress bar")
    p.add_argument("--no-progress", dest="progress", action="store_false",
                   help="never show a progress bar")


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of every command."""
    from ._version import __version__

    parser = _Parser(prog="crossflock",
                     description="Does the Toner-Tu continuum description reproduce the "
                                 "Vicsek-family particle model here?")
    parser.add_argument("--version", action="version", version=f"crossflock {__version__}")
    parser.add_argument("--threads", type=int, default=None, metavar="N",
                        help="numba threads for this process (results do not depend on it)")
    sub = parser.add_subparsers(dest="command", required=True, parser_class=_Parser)

    p = sub.add_parser("validate", help="check a config and print it fully resolved")
    _add_config(p)
    p.add_argument("--explain", action="store_true",
                   help="also list every key with its default and meaning")

    p = sub.add_parser("run", help="one run of one engine")
    _add_config(p)
    p.add_argument("--engine", required=True, choices=["agents", "continuum"])
    p.add_argument("-o", "--output", required=True, metavar="OUT.nc")
    p.add_argument("--checkpoint", metavar="CKPT.nc",
                   help="write checkpoints here (every <engine>.checkpoint_every)")
    p.add_argument("--resume", metavar="CKPT.nc", help="continue from this checkpoint")
    _add_progress(p)

    p = sub.add_parser("analyze", help="observables of one run file")
    p.add_argument("run_file", metavar="RUN.nc")
    p.add_argument("-o", "--output", required=True, metavar="OBS.nc")

    p = sub.add_parser("compare", help="both engines, observables, mismatch and report")
    _add_config(p)
    p.add_argument("-o", "--output", required=True, metavar="DIR")
    p.add_argument("--coefficients", metavar="COEFFS.toml",
                   help="calibrated coefficients to run the continuum with (beside kinetic)")
    _add_progress(p)

    p = sub.add_parser("coefficients", help="print the resolved continuum coefficients")
    _add_config(p)

    p = sub.add_parser("calibrate", help="fit continuum coefficients to a field or particle run")
    p.add_argument("run_file", metavar="RUN.nc")
    p.add_argument("-o", "--output", required=True, metavar="COEFFS.toml")

    p = sub.add_parser("sweep", help="density-noise phase sweep on dask")
    p.add_argument("sweep_file", metavar="SWEEP.toml")
    p.add_argument("-o", "--output", required=True, metavar="DIR")
    g = p.add_mutually_exclusive_group()
    g.add_argument("--workers", type=int, default=None, metavar="N",
                   help="worker processes of the embedded local cluster")
    g.add_argument("--scheduler", metavar="ADDRESS", help="a running dask scheduler")
    _add_progress(p)

    p = sub.add_parser("check", help="statistical regression gate against a reference")
    _add_config(p)
    p.add_argument("--reference", required=True, metavar="REF.nc")
    p.add_argument("--update", action="store_true", help="write or refresh the reference")
    p.add_argument("--allow-config-change", action="store_true",
                   help="compare even if the reference was made with other physics")
    _add_progress(p)

    p = sub.add_parser("demo", help="the built-in scenario end to end")
    p.add_argument("-o", "--output", default="crossflock-demo", metavar="DIR")
    _add_progress(p)
    return parser


def _sigterm(signum, frame):
    raise KeyboardInterrupt


def _install_sigterm():
    """Treat SIGTERM like Ctrl-C so atomic writes clean up and the message is printed."""
    import signal
    import threading

    if threading.current_thread() is threading.main_thread():
        signal.signal(signal.SIGTERM, _sigterm)


def _show_warning(message, category, filename, lineno, file=None, line=None):
    print(f"crossflock: warning: {message}", file=sys.stderr)


def main(argv=None) -> int:
    """Entry point; returns the exit code."""
    parser = build_parser()
    args = parser.parse_args(argv)
    from . import _commands

    _install_sigterm()
    if args.threads is not None:
        import numba

        if not 1 <= args.threads <= numba.config.NUMBA_NUM_THREADS:
            print(f"crossflock: error: --threads must be between 1 and "
                  f"{numba.config.NUMBA_NUM_THREADS} (got {args.threads})", file=sys.stderr)
            return 2
        numba.set_num_threads(args.threads)
    warnings.showwarning = _show_warning
    try:
        handler = getattr(_commands, "cmd_" + args.command)
        code = handler(args)
    except CrossflockError as exc:
        message = " ".join(str(exc).split("\n")).replace("\r", " ")
        print(f"crossflock: error: {message}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print("crossflock: interrupted; finished files are complete, nothing half-written "
              "was kept; re-run the same command to resume", file=sys.stderr)
        return 130
    except BrokenPipeError:  # pragma: no cover - `crossflock validate | head`
        return 0
    return int(code or 0)


def _entry():  # pragma: no cover
    sys.exit(main())


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
