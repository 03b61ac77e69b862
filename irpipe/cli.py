"""Command line: ``irpipe run | validate | demo | schema | inspect | emissivity | calibrate``.

Errors print one line (what, where, the fix) and exit with 2 (config), 3 (input data) or
1 (anything else); ``--debug`` shows the traceback. Heavy modules load only when a
command needs them, so ``irpipe --help`` stays fast.
"""
from __future__ import annotations

import argparse
import json
import sys


def _parser():
    p = argparse.ArgumentParser(prog="irpipe", description="Radiometric correction, findings and reports "
                                "for long-wave infrared survey stacks.")
    p.add_argument("--debug", action="store_true", help="show Python tracebacks on errors")
    p.add_argument("--version", action="store_true", help="print the version and exit")
    sub = p.add_subparsers(dest="command")
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("--debug", action="store_true", default=argparse.SUPPRESS,
                        help="show Python tracebacks on errors")

    r = sub.add_parser("run", parents=[common], help="process the stacks of a survey config")
    r.add_argument("config")
    r.add_argument("--out", help="output folder (overrides output.dir)")
    r.add_argument("--resume", action="store_true", help="skip stacks whose inputs and config are unchanged")
    r.add_argument("--keep-going", action="store_true", help="go on with the other stacks when one fails")
    r.add_argument("--workers", type=int, help="run on a local dask cluster with N workers")
    r.add_argument("--scheduler", help="address of an existing dask.distributed scheduler")
    r.add_argument("--jobs", type=int, help="stacks processed at once, each in its own process (default: the "
                   "machine's cores; 1 = one after another)")
    r.add_argument("--quiet", action="store_true", help="no progress bar")
    r.add_argument("--frame-chunk", type=int, help="frames per chunk (memory vs. overhead)")

    v = sub.add_parser("validate", parents=[common], help="check a config and its input files without processing")
    v.add_argument("config")

    d = sub.add_parser("demo", parents=[common], help="run the bundled demo survey")
    d.add_argument("--out", default="demo_out", help="output folder (default demo_out)")
    d.add_argument("--quiet", action="store_true")

    sub.add_parser("schema", parents=[common], help="print the JSON Schema of the survey config")

    ins = sub.add_parser("inspect", parents=[common], help="write one self-contained HTML page to read temperatures, "
                         "draw regions and assign emissivity by region")
    ins.add_argument("config")
    ins.add_argument("--out", help="page to write (default: <config>.inspect.html beside the config)")
    ins.add_argument("--stack", action="append", metavar="NAME", help="only this stack (repeat for more)")
    from .cli_field import register as _register_field
    _register_field(sub, common)
    return p


def main(argv=None):
    args = _parser().parse_args(argv)
    if args.version:
        from . import __version__
        print(f"irpipe {__version__}")
        return 0
    if not args.command:
        _parser().print_help()
        return 0
    try:
        return _dispatch(args)
    except KeyboardInterrupt:
        print("irpipe: interrupted; complete outputs of earlier stacks are kept", file=sys.stderr)
        return 130
    except Exception as exc:  # one line, mapped exit code
        from .errors import IrpipeError
        if args.debug:
            raise
        if isinstance(exc, IrpipeError):
            print(f"irpipe: error: {exc}", file=sys.stderr)
            return exc.exit_code
        print(f"irpipe: unexpected error: {type(exc).__name__}: {str(exc).splitlines()[0] if str(exc) else ''} "
              "(run again with --debug for the traceback and report it)", file=sys.stderr)
        return 1


def _dispatch(args):
    if args.command == "schema":
        from .config import json_schema
        _print_or_quiet_pipe(json.dumps(json_schema(), indent=2))
        return 0
    if args.command == "validate":
        from pathlib import Path
        from .config import load_config
        from .pipeline import plan
        cfg = load_config(args.config)
        _, _, ctxs = plan(cfg, Path("."), with_model=False)   # every check, no tables built
        print(f"{args.config}: OK ({len(ctxs)} stack(s): "
              + ", ".join(f"{c.name} {c.shape[0]}x{c.shape[1]}x{c.shape[2]}" for c in ctxs) + ")")
        return 0
    if args.command == "inspect":
        from .inspect import write_page
        dest, notes = write_page(args.config, args.out, args.stack)
        for n in notes:
            print(f"irpipe: {n}")
        print(f"irpipe: page written to {dest} (open it in a browser; it needs no server or network)")
        return 0
    if args.command in ("run", "demo"):
        from .buffers import tune_allocator
        tune_allocator()
    if args.command == "run":
        if args.jobs is not None and (args.workers or args.scheduler):
            from .errors import ConfigError
            raise ConfigError("--jobs runs whole stacks in parallel processes and --workers/--scheduler split one "
                              "stack's pixels over a dask cluster: give one of them")
        if args.jobs is not None and args.jobs < 1:
            from .errors import ConfigError
            raise ConfigError(f"--jobs {args.jobs}: give a number of processes of 1 or more")
        from .pipeline import default_jobs, run
        jobs = args.jobs if args.jobs is not None else (1 if (args.workers or args.scheduler) else default_jobs())
        res = run(args.config, args.out, resume=args.resume, keep_going=args.keep_going, quiet=args.quiet,
                  workers=args.workers, scheduler=args.scheduler, frame_chunk=args.frame_chunk, jobs=jobs)
        return _summary(res)
    if args.command in ("emissivity", "calibrate"):
        from .cli_field import dispatch as _dispatch_field
        return _dispatch_field(args)
    if args.command == "demo":
        from .demo import run_demo
        return _summary(run_demo(args.out, quiet=args.quiet))
    return 1


def _print_or_quiet_pipe(text):
    """Print to stdout; a reader that closes the pipe early (``irpipe schema | head``) ends
    the output quietly."""
    import os
    try:
        print(text)
        sys.stdout.flush()
    except BrokenPipeError:
        # stdout is gone: point it at devnull so the interpreter's final flush is quiet too
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())


def _summary(res):
    done = [s for s in res.report["stacks"] if s.get("status") == "done" and s["name"] not in res.skipped]
    print(f"irpipe: {len(done)} stack(s) processed, {len(res.skipped)} unchanged and skipped, "
          f"{len(res.failed)} failed; outputs in {res.out_dir}")
    for name, msg, _ in res.failed:
        print(f"irpipe: failed: {name}: {msg}", file=sys.stderr)
    return res.exit_code


if __name__ == "__main__":
    sys.exit(main())
