"""The ``hbmodel`` command: a thin argparse layer over the library.

Each sub-command lives in ``hbmodel/cli/<name>.py`` and exposes
``NAME``, ``HELP``, ``add_arguments(parser)`` and ``run(args) -> int``.
Every command accepts ``--config FILE.toml`` whose keys are the command's long
option names (dashes or underscores); flags given on the command line win.

Errors the user can fix (bad values, missing files, unreadable formats) are
reported as one line on stderr with exit status 2 -- never a traceback.
"""
from __future__ import annotations

import argparse
import contextlib
import importlib
import sys

from hbmodel.core.version import __version__
from hbmodel.core.messages import first_line
from hbmodel.cli.common import add_resource_arguments, renamed_config_keys, toml_parser, warn_renamed

#: Sub-command modules, in the order ``hbmodel --help`` lists them.
COMMANDS = ("predict", "mock", "fit", "distance", "classify", "batch", "demo")

EXIT_USAGE = 2
EXIT_INTERRUPTED = 130  # 128 + SIGINT, as shells report a Ctrl-C (common practice)
EXIT_BROKEN_PIPE = 141  # 128 + SIGPIPE, as shells report a closed pipe (common practice)


class UserError(Exception):
    """An error caused by the user's input; reported as one line, exit 2."""


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # one line, exit 2 (argparse's own convention too)
        self.exit(EXIT_USAGE, f"hbmodel: error: {message}\n")


def _load_config(path: str) -> dict:
    tomllib = toml_parser()
    try:
        with open(path, "rb") as fh:
            cfg = tomllib.load(fh)
    except FileNotFoundError:
        raise UserError(f"config file not found: {path}") from None
    except tomllib.TOMLDecodeError as exc:
        raise UserError(f"config file {path} is not valid TOML: {exc}") from None
    return {str(k).replace("-", "_"): v for k, v in cfg.items()}


def _apply_config(parser: argparse.ArgumentParser, argv: list[str], cfg: dict):
    """Use config values as parser defaults so that explicit flags override them."""
    known = {a.dest: a for a in parser._actions}
    renamed = renamed_config_keys(parser)
    for old in [k for k in cfg if k in renamed and k not in known]:
        warn_renamed(_key(old), _key(renamed[old]) + " in the config file")
        cfg[renamed[old]] = cfg.pop(old)
    unknown = sorted(set(cfg) - set(known))
    if unknown:
        raise UserError(f"unknown option(s) in config file: {', '.join(unknown)}")
    defaults = {}
    for key, value in cfg.items():
        action = known[key]
        if isinstance(value, dict) or (isinstance(value, list) and any(isinstance(v, (dict, list)) for v in value)):
            raise UserError(f"config key {_key(key)}: expected a number, string, boolean or list of them")
        if isinstance(value, list) and action.nargs in (None, "?"):
            value = ",".join(str(v) for v in value)
        defaults[key] = _config_value(action, key, value)
        if action.required:
            action.required = False
    parser.set_defaults(**defaults)
    missing = [a.dest for a in parser._actions if a.required and a.dest not in defaults]
    return missing


def _key(dest: str) -> str:
    return repr(dest.replace("_", "-"))


def _config_value(action: argparse.Action, key: str, value):
    """Check and convert one config value as the command line would, naming the key on failure.

    Integers must be integers (``n-hb = 10.7`` is an error, never truncated); booleans are for
    flags only; numbers are for numeric options; ``choices`` are enforced."""
    what = f"config key {_key(key)}"
    if action.nargs == 0:  # a flag (store_true / store_false)
        if not isinstance(value, bool):
            raise UserError(f"{what}: expected true or false, got {value!r}")
        return value
    if isinstance(value, bool):
        raise UserError(f"{what}: expected a value, not a boolean ({str(value).lower()})")
    if action.type is int:
        if isinstance(value, float):
            raise UserError(f"{what}: expected an integer, got {value!r}")
        if isinstance(value, str):
            try:
                value = int(value.strip())
            except ValueError:
                raise UserError(f"{what}: expected an integer, got {value!r}") from None
    elif action.type is float:
        try:
            value = float(value)
        except (TypeError, ValueError):
            raise UserError(f"{what}: expected a number, got {value!r}") from None
    elif action.type is not None and isinstance(value, str):
        try:
            value = action.type(value)
        except (TypeError, ValueError, argparse.ArgumentTypeError) as exc:
            raise UserError(f"{what}: {exc}") from None
    elif action.type is None and not isinstance(value, str):
        value = str(value)  # string options (file names, band lists, ranges) given as TOML numbers
    if action.choices is not None and value not in action.choices:
        raise UserError(f"{what}: {value!r} is not one of {', '.join(map(str, action.choices))}")
    return value


def _check_exclusive(sub: argparse.ArgumentParser, argv: list[str], cfg: dict) -> None:
    """Mutually exclusive options stay exclusive when one (or both) comes from the config file.

    argparse checks the command line itself; here an option is 'given' if it is in the config file
    (with a value) or on the command line (found by parsing into a namespace of sentinels)."""
    unset = object()
    ns = argparse.Namespace(**{a.dest: unset for a in sub._actions if a.dest != argparse.SUPPRESS})
    sub.parse_known_args(argv, ns)
    for group in sub._mutually_exclusive_groups:
        given = []
        for a in group._group_actions:
            if getattr(ns, a.dest, unset) is not unset:
                given.append(f"{a.option_strings[0]} (command line)")
            elif cfg.get(a.dest) is not None:
                given.append(f"{a.option_strings[0]} (config file)")
        if len(given) > 1:
            names = "/".join(a.option_strings[0] for a in group._group_actions)
            raise UserError(f"{names} are mutually exclusive: got {' and '.join(given)}")


def build_parser(only: str | None = None) -> tuple[argparse.ArgumentParser, dict]:
    """The ``hbmodel`` parser and ``{name: (module, sub-parser)}``; ``only`` (a command name): that command's
    sub-parser alone, so a run imports one command module, not all of them."""
    parser = _Parser(prog="hbmodel", description="hbmodel: horizontal-branch and red-clump modelling — predict, "
                     "mock, fit mass loss, clump distances.")
    parser.add_argument("--version", action="version", version=f"hbmodel {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    modules = {}
    for name in COMMANDS if only not in COMMANDS else (only,):
        mod = importlib.import_module(f"hbmodel.cli.{name}")
        p = sub.add_parser(mod.NAME, help=mod.HELP, description=getattr(mod, "DESCRIPTION", mod.HELP),
                           formatter_class=argparse.RawDescriptionHelpFormatter)
        p.add_argument("--config", metavar="FILE.toml",
                       help="read options from a TOML file (command-line flags override)")
        mod.add_arguments(p)
        add_resource_arguments(p)
        modules[mod.NAME] = (mod, p)
    return parser, modules


def main(argv: list[str] | None = None) -> int:
    """Run the ``hbmodel`` command line ``argv`` (default: the process's own arguments); the exit status."""
    if argv is None:
        status = _main_process()
    else:
        status = _main(argv)
    if argv is None:
        # The process ends next.  Interpreter shutdown runs the cycle collector over every object still
        # alive (numpy's and pyarrow's modules among them: 0.1-0.2 s measured on the 2-core machine); frozen,
        # they are left to the process's end.  Outputs are closed by now (written atomically) and the
        # interpreter flushes the standard streams itself.  Not done for in-process calls (tests).
        import gc
        gc.freeze()
    return status


def _main_process() -> int:
    """:func:`_main` for the process's own arguments, with Ctrl-C made reliable.

    A ``KeyboardInterrupt`` raised while a compiled extension module is being imported can be lost
    inside that module's initialisation (seen on the 2-core machine, about 1 run in 15, with the
    interrupt landing in numpy.random's import), and the run would carry on as if never interrupted.
    So every SIGINT is also recorded: a run that was interrupted ends with the one line and exit
    status 130 even if its ``KeyboardInterrupt`` went missing.  Once the interrupt has been handled,
    further SIGINTs are ignored, so that a second Ctrl-C cannot kill the process while it exits
    (a killed process has no exit status 130 and may print a traceback)."""
    import signal
    import threading

    seen: list[int] = []

    def on_sigint(signum, frame):
        seen.append(signum)
        raise KeyboardInterrupt

    managed = (threading.current_thread() is threading.main_thread()
               and signal.getsignal(signal.SIGINT) is signal.default_int_handler)  # not if SIGINT is ignored
    if managed:
        signal.signal(signal.SIGINT, on_sigint)
        # Once interrupted, a worker pool's bookkeeping thread (joblib/loky's executor manager) can trip
        # over the jobs the interrupt cancelled (KeyError in its queue of pending items, seen in CI about
        # 1 run in 20) and Python would print that thread's traceback before our one line.  Such
        # after-the-interrupt failures of background threads are expected and kept quiet; any other
        # thread failure is reported as Python reports it.
        default_hook = threading.excepthook

        def on_thread_error(args):
            if not seen:
                default_hook(args)

        threading.excepthook = on_thread_error
    status = _main(None)
    if managed and seen:
        signal.signal(signal.SIGINT, signal.SIG_IGN)
        if status != EXIT_INTERRUPTED:
            print("hbmodel: interrupted", file=sys.stderr)
            status = EXIT_INTERRUPTED
    return status


def _main(argv: list[str] | None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    try:
        # First pass: find the command and a possible --config file.
        command = argv[0] if argv and not argv[0].startswith("-") else None
        parser, modules = build_parser(only=command)
        if command in modules:
            mod, sub = modules[command]
            cfg_path = _find_config(argv)
            cfg = _load_config(cfg_path) if cfg_path else {}
            if cfg:
                _apply_config(sub, argv, cfg)
        args = parser.parse_args(argv)
        if command in modules and cfg:
            _check_exclusive(modules[command][1], argv[1:], cfg)
        if not args.command:
            parser.print_help()
            return EXIT_USAGE
        mod, _ = modules[args.command]
        return int(mod.run(args) or 0)
    except SystemExit as exc:  # argparse's own exits (help, usage errors)
        return int(exc.code or 0) if not isinstance(exc.code, str) else EXIT_USAGE
    except BrokenPipeError:
        # the reader of our output went away (e.g. `hbmodel predict --json | head`): stop quietly, as the
        # standard tools do; stdout is pointed at /dev/null so that the interpreter's final flush is silent
        # (Python documentation, "Note on SIGPIPE")
        import os
        with contextlib.suppress(OSError, ValueError):
            os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return EXIT_BROKEN_PIPE
    except (UserError, ValueError, OSError, KeyError) as exc:
        msg = first_line(exc) or type(exc).__name__
        if isinstance(exc, KeyError):
            msg = f"missing key or column: {msg}"
        print(f"hbmodel: error: {msg}", file=sys.stderr)
        return EXIT_USAGE
    except KeyboardInterrupt:
        if argv is None:  # the process's own run: the interrupt is handled, a second one is a no-op
            import signal
            with contextlib.suppress(ValueError):  # ValueError: not the main thread
                signal.signal(signal.SIGINT, lambda signum, frame: None)
        print("hbmodel: interrupted", file=sys.stderr)
        return EXIT_INTERRUPTED
    except Exception as exc:  # an unexpected failure: still one line (set HBMODEL_DEBUG=1 for the traceback)
        import os
        if os.environ.get("HBMODEL_DEBUG"):
            raise
        msg = first_line(exc)
        print(f"hbmodel: internal error ({type(exc).__name__}): {msg} -- please report it; "
              f"HBMODEL_DEBUG=1 shows the traceback", file=sys.stderr)
        return 1


def _find_config(argv: list[str]) -> str | None:
    for i, a in enumerate(argv):
        if a == "--config" and i + 1 < len(argv):
            return argv[i + 1]
        if a.startswith("--config="):
            return a.split("=", 1)[1]
    return None


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
