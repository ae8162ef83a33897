"""Command line: parse, call the API, print. Exit 0 on success, 2 on a user error, 1 otherwise."""

from __future__ import annotations

import argparse
import os
import sys
import traceback
import warnings
from pathlib import Path

from ._version import __version__
from .errors import GridpopError, OutputExistsError, ScenarioWarning


def _scenario_with_overrides(args, path=None):
    from .config import load_scenario

    scenario = load_scenario(args.scenario if path is None else path)
    overrides = {k: getattr(args, k) for k in ("years", "replicates", "seed")
                 if getattr(args, k, None) is not None}
    if overrides:
        scenario = scenario.replace("run", **overrides)
    return scenario


def _out_dir(args, scenario) -> Path:
    return Path(args.out) if args.out else Path("results") / scenario.path.stem


def cmd_check(args) -> int:
    from .landscape import build_landscape
    from .simulation.check import describe, merged_lines, runtime_line
    from .simulation.model import build_model
    from .simulation.resources import footprint_lines

    scenario = _scenario_with_overrides(args)
    model = build_model(scenario, build_landscape(scenario, stochastic=scenario.growth.stochastic))
    print("\n".join(describe(scenario, model)
                    + footprint_lines(scenario, model, _out_dir(args, scenario))
                    + [runtime_line(model)] + merged_lines(scenario)))
    return 0


def cmd_run(args) -> int:
    from .simulation.run import run

    scenario = _scenario_with_overrides(args)
    out = _out_dir(args, scenario)
    show = not args.quiet and sys.stderr.isatty()
    try:
        run(scenario, out, overwrite=args.overwrite, progress=show, workers=args.workers,
            scheduler=args.scheduler, resume=args.resume, force=args.force,
            plots=not args.no_plots)
    except KeyboardInterrupt:
        return _interrupted(args, ["run", args.scenario], out)
    if not args.quiet:
        import json

        from .analysis.summary import headline

        print(headline(json.loads((out / "summary.json").read_text())))
        print(f"results written to {out}")
    return 0


def _interrupted(args, command: list[str], out: Path) -> int:
    """Say where the work of an interrupted run or comparison is kept and the command that
    continues it (exit code 130, as for any Ctrl-C)."""
    from .io.results import working_folder

    partial = working_folder(Path(out))
    if not partial.is_dir():
        print("gridpop: interrupted", file=sys.stderr)
        return 130
    again = ["gridpop", *command, "--out", str(out)]
    again += [f"--{k} {getattr(args, k)}" for k in ("years", "replicates", "seed")
              if getattr(args, k) is not None]
    print(f"gridpop: interrupted; the finished work is kept in {partial}. "
          f"`{' '.join(again)} --resume` continues it.", file=sys.stderr)
    return 130


def cmd_compare(args) -> int:
    import json

    from .analysis.compare import compare, table

    scenarios = [_scenario_with_overrides(args, path) for path in args.scenarios]
    show = not args.quiet and sys.stderr.isatty()
    try:
        out = compare(scenarios, args.out, overwrite=args.overwrite, progress=show,
                      plots=not args.no_plots, workers=args.workers,
                      scheduler=args.scheduler, resume=args.resume, force=args.force)
    except KeyboardInterrupt:
        return _interrupted(args, ["compare", *args.scenarios], args.out)
    if not args.quiet:
        print(table(json.loads((out / "comparison.json").read_text())))
        print(f"results written to {out}")
    return 0


def cmd_sensitivity(args) -> int:
    from .config import load_study
    from .simulation.sensitivity import sensitivity

    plans, uncertainty, _ = load_study(args.scenarios)
    show = not args.quiet and sys.stderr.isatty()
    out = sensitivity(plans, uncertainty, args.out, overwrite=args.overwrite, progress=show,
                      workers=args.workers, scheduler=args.scheduler, resume=args.resume,
                      replicates=args.replicates, years=args.years)
    if not args.quiet:
        from .report.sensitivity import ranking_sentences, read_csv

        for line in ranking_sentences(read_csv(out / "ranking.csv"),
                                      [s.path.stem for s in plans]):
            print(line)
        print(f"results written to {out}")
    return 0


def cmd_report(args) -> int:
    if (Path(args.dir) / "sensitivity.json").is_file():
        from .report.sensitivity import write_sensitivity_report as write_report
    else:
        from .report.html import write_report

    print(f"report written to {write_report(args.dir, args.out)}")
    return 0


def cmd_compile(args) -> int:
    import time

    from .config import load_scenario
    from .simulation.run import compile_kernels

    for path in args.scenarios:
        start = time.perf_counter()
        with warnings.catch_warnings():  # `check` and `run` say them; here they are noise
            warnings.simplefilter("ignore", ScenarioWarning)
            compile_kernels(load_scenario(path))
        print(f"{path}: kernels ready in {time.perf_counter() - start:.1f} s")
    from . import _jit, rng

    print(f"numba's cache holds them ({_jit.cache_folder(rng.mix64)} and the like): runs of these "
          "scenarios start without compiling")
    return 0


def cmd_init(args) -> int:
    from .config import template_toml

    folder = Path(args.dir)
    target = folder / "scenario.toml"
    if target.exists():
        raise OutputExistsError(f"{target}: exists; remove it or choose another folder.")
    folder.mkdir(parents=True, exist_ok=True)
    target.write_text(template_toml())
    print(f"wrote {target}: edit the paths and values, then run `gridpop check {target}`")
    return 0


def _add_run_overrides(p):
    p.add_argument("--years", type=int, help="override [run] years")
    p.add_argument("--replicates", type=int, help="override [run] replicates")
    p.add_argument("--seed", type=int, help="override [run] seed")


def _add_output_flags(p):
    """``--overwrite`` and ``--quiet``, for every command that writes an output folder."""
    p.add_argument("--overwrite", action="store_true", help="replace an existing output folder")
    p.add_argument("--quiet", action="store_true", help="no progress bar or messages")


def _add_run_options(p, *, resume: str):
    """The options `run` and `compare` share: output, execution and ``--resume`` (its help)."""
    _add_run_overrides(p)
    _add_output_flags(p)
    p.add_argument("--no-plots", action="store_true", help="do not draw the PNG plots")
    p.add_argument("--workers", type=int, metavar="N", help="run batches of replicates on a "
                   "local Dask cluster of N worker processes (default: in this process)")
    p.add_argument("--scheduler", metavar="ADDRESS", help="run batches on the Dask cluster at "
                   "ADDRESS (tcp://host:8786); the output folder must be on a filesystem "
                   "its workers share")
    p.add_argument("--resume", action="store_true", help=resume)
    p.add_argument("--force", action="store_true", help="start even if the estimated "
                   "memory or disk need exceeds what is free")


def parser() -> argparse.ArgumentParser:
    ap = argparse.ArgumentParser(prog="gridpop", description="Spatial grid population "
                                 "simulator for conservation planning.")
    ap.add_argument("--version", action="version", version=f"gridpop {__version__}")
    sub = ap.add_subparsers(dest="command", required=True, metavar="COMMAND")

    p = sub.add_parser("check", help="validate a scenario and print what was understood")
    p.add_argument("scenario")
    _add_run_overrides(p)
    p.add_argument("--out", help="output folder of the run (where free disk space is "
                   "looked up; default results/<scenario name>)")
    p.set_defaults(func=cmd_check)

    # one parser per command: the declarations repeat in shape (name, --out, options), not in
    # content
    p = sub.add_parser("run", help="run a scenario")
    p.add_argument("scenario")
    p.add_argument("--out", help="output folder (default results/<scenario name>)")
    _add_run_options(p, resume="continue an interrupted run of the same scenario into the "
                     "same --out, keeping its finished batches")
    p.set_defaults(func=cmd_run)

    p = sub.add_parser("compare", help="run plans with common random numbers and compare them "
                       "with the first")
    p.add_argument("scenarios", nargs="+", metavar="SCENARIO",
                   help="scenario files; the first is the baseline")
    p.add_argument("--out", required=True, help="output folder")
    _add_run_options(p, resume="continue an interrupted comparison of the same plans into "
                     "the same --out, keeping its finished plans and batches")
    p.set_defaults(func=cmd_compare)

    p = sub.add_parser("sensitivity", help="run plans under the parameter sets of an "
                       "[uncertainty] design; sensitivity indices and ranking robustness")
    p.add_argument("scenarios", nargs="+", metavar="SCENARIO",
                   help="plan files; [uncertainty] in one of them or in a file of its own")
    p.add_argument("--out", required=True, help="output folder")
    p.add_argument("--years", type=int, help="override [run] years")
    p.add_argument("--replicates", type=int, help="override [run] replicates")
    _add_output_flags(p)
    p.add_argument("--workers", type=int, metavar="N", help="run parameter sets on a local "
                   "Dask cluster of N worker processes (default: in this process)")
    p.add_argument("--scheduler", metavar="ADDRESS", help="run parameter sets on the Dask "
                   "cluster at ADDRESS; the output folder must be on a filesystem its workers "
                   "share")
    p.add_argument("--resume", action="store_true", help="continue an interrupted analysis "
                   "into the same --out, keeping its finished parameter sets")
    p.set_defaults(func=cmd_sensitivity)

    p = sub.add_parser("report", help="write a self-contained HTML report of a run, compare "
                       "or sensitivity folder")
    p.add_argument("dir", metavar="RESULT_DIR")
    p.add_argument("--out", metavar="FILE", help="report file (default DIR/report.html)")
    p.set_defaults(func=cmd_report)

    p = sub.add_parser("compile", help="compile the kernels that runs of scenarios use into "
                       "numba's cache, so that those runs start without compiling (once after "
                       "installing)")
    p.add_argument("scenarios", nargs="+", metavar="SCENARIO", help="scenario files")
    p.set_defaults(func=cmd_compile)

    p = sub.add_parser("init", help="write a commented scenario template into DIR")
    p.add_argument("dir")
    p.set_defaults(func=cmd_init)
    return ap


def main(argv=None) -> int:
    args = parser().parse_args(argv)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("default")
            warnings.showwarning = _WarningPrinter()
            return args.func(args)
    except GridpopError as exc:
        print(f"gridpop: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("gridpop: interrupted", file=sys.stderr)
        return 130
    except Exception as exc:  # an internal error: say so, keep the details for a bug report
        print(f"gridpop: internal error: {type(exc).__name__}: {exc}", file=sys.stderr)
        if os.environ.get("GRIDPOP_DEBUG"):
            traceback.print_exc()
        else:
            print("(set GRIDPOP_DEBUG=1 for the traceback)", file=sys.stderr)
        return 1


class _WarningPrinter:
    """Prints each warning on one line; a warning that repeats an earlier one for another
    scenario file (the plans of a comparison share their base) is shortened to a reference."""

    def __init__(self) -> None:
        self.first: dict[str, str] = {}  # the text after the file -> the file that had it

    def __call__(self, message, category, filename, lineno, file=None, line=None):
        text = str(message)
        if isinstance(message, ScenarioWarning):
            first = self.first.setdefault(message.detail, message.file)
            if first != message.file:
                text = f"{message.file}: the same as for {Path(first).name} above."
        print(f"gridpop: warning: {text}", file=sys.stderr)


if __name__ == "__main__":
    sys.exit(main())
