"""Command line: a thin layer over :mod:`siting.runner` and :mod:`siting.job`.

Exit codes: 0 ok; 1 unexpected error; 2 bad job or input data; 3 the solver gave no usable plan.
``--debug`` shows the traceback of any error.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from . import __version__
from .errors import SitingError

EXIT_CODES = """exit codes: 0 ok, 1 unexpected error, 2 bad job or input data, 3 solver gave no usable plan"""


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="siting", description="Choose building facades for passive reflecting surfaces.", epilog=EXIT_CODES)
    parser.add_argument("--version", action="version", version=f"siting {__version__}")
    sub = parser.add_subparsers(dest="command", required=True)

    def common(p, many=False):
        if many:
            p.add_argument("job", nargs="+", help="job file (TOML); several files or a folder of them run as a "
                           "resumable queue (siting.batch)")
        else:
            p.add_argument("job", help="job file (TOML)")
        p.add_argument("--set", dest="overrides", action="append", default=[], metavar="SECTION.KEY=VALUE",
                       help="override a job key, e.g. --set budget.max_cost=20000 (repeatable)")
        p.add_argument("--debug", action="store_true", help="show the traceback of an error")
        p.add_argument("--overwrite", action="store_true",
                       help="write into an output folder holding files no siting run created")

    plan = sub.add_parser("plan", help="run a job end to end and write the plan", epilog=EXIT_CODES)
    common(plan, many=True)
    plan.add_argument("--parallel", type=int, default=1, metavar="N",
                      help="run up to N jobs of a batch, or N scenarios of a job, at once in separate processes")
    plan.add_argument("--queue", default=None, metavar="FILE",
                      help="queue state file of a batch (default siting_queue.json in the jobs' folder)")
    plan.add_argument("--fresh", action="store_true", help="ignore the stage cache and recompute everything")
    plan.add_argument("--workers", type=int, default=0, metavar="N",
                      help="run the heavy stages on a local Dask cluster of N worker processes")
    plan.add_argument("--scheduler", default=None, metavar="ADDRESS",
                      help="run the heavy stages on an existing Dask cluster (e.g. tcp://host:8786)")
    shown = plan.add_mutually_exclusive_group()
    shown.add_argument("--progress", action="store_true", default=None,
                       help="show progress bars even when stderr is not a terminal (on a terminal they show anyway)")
    shown.add_argument("--quiet", action="store_true",
                       help="print nothing but errors and the warning of an empty plan: no progress bars, no notices, "
                       "no summary")

    validate = sub.add_parser("validate", help="check a job and its input layers; print a district summary",
                              epilog=EXIT_CODES)
    common(validate)

    keys = sub.add_parser("keys", help="print the job-file reference (every key, unit, default, range)")
    keys.add_argument("--debug", action="store_true", help=argparse.SUPPRESS)

    prepare = sub.add_parser("prepare", help="compile the line-of-sight and surface kernels once, after installing "
                             "(else the first plan compiles them)")  # fmt: skip
    prepare.add_argument("--debug", action="store_true", help=argparse.SUPPRESS)
    return parser


def show_progress(progress: bool | None, quiet: bool, terminal: bool) -> bool:
    """Progress bars: ``--progress`` forces them on, ``--quiet`` off; otherwise on when stderr is a terminal."""
    if progress:
        return True
    return not quiet and terminal


def main(argv: list[str] | None = None) -> int:
    args = _parser().parse_args(argv)
    try:
        return _dispatch(args)
    except SitingError as exc:
        if args.debug:
            raise
        print(f"siting: error: {exc}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print("siting: interrupted; rerun the same command to resume from the stage cache", file=sys.stderr)
        return 1
    except Exception as exc:  # noqa: BLE001 - the last line of defence turns surprises into one message
        if args.debug:
            raise
        print(f"siting: unexpected error: {type(exc).__name__}: {exc} (rerun with --debug for the traceback)",
              file=sys.stderr)
        return 1


def _dispatch(args) -> int:
    from .job import Job, reference_markdown

    if args.command == "keys":
        print(reference_markdown())
        return 0
    if args.command == "prepare":
        return _prepare()
    if args.command == "plan":
        from .batch import expand_jobs
        from .scenarios import has_scenarios

        jobs = expand_jobs(args.job)
        if len(jobs) > 1 or Path(args.job[0]).is_dir():
            return _batch(args)
        if has_scenarios(jobs[0]):
            return _scenarios(args, jobs[0])
        args.job = str(jobs[0])
    from .preflight import check_district, check_job

    job = Job.from_toml(args.job, args.overrides)
    if args.command == "validate":
        check_job(job, job_file=args.job, overwrite=args.overwrite)  # before any layer is read
        from .district import summary
        from .runner import capture_notes
        from .stages import load_stage

        notes: list[str] = []
        with capture_notes(notes):
            district = load_stage(job.inputs, job.area)
            check_district(job, district)
        print(summary(district))
        for message in notes:
            if message not in district.notes:  # the summary lists the notes already
                print(f"warning: {message}")
        from .scenarios import validate_scenarios

        return validate_scenarios(args.job, args.overrides, print)
    from .runner import run

    result = run(job, fresh=args.fresh, workers=args.workers, scheduler=args.scheduler,
                 progress=show_progress(args.progress, args.quiet, sys.stderr.isatty()), notices=not args.quiet,
                 overwrite=args.overwrite, job_file=args.job)  # run() checks the job before any layer is read
    for line in _empty_plan_warnings(result):  # also with --quiet: the plan is not what the user asked for
        print(f"siting: warning: {line}", file=sys.stderr)
    if not args.quiet:
        plan = result.plan
        covered_before = float((result.users["weight"] * result.gains.direct["covered"]).sum())
        total = float(result.users["weight"].sum())
        currency = f" {job.budget.currency}" if job.budget.currency else ""
        print(f"plan: {len(plan.chosen)} surface(s), cost {plan.cost:,.0f}{currency}, weight newly covered "
              f"{plan.objective:,.1f} (before {covered_before:,.1f} of {total:,.1f}); solver {plan.status}, "
              f"gap {plan.gap:.2%}")
        from .plandiff import cli_lines

        for line in cli_lines(result.outputs.get("run_json")):  # field verdicts and changes (siting.plandiff)
            print(line)
        print(f"outputs in {job.output.folder}")
    return 0


def _empty_plan_warnings(result) -> list[str]:
    """What to say on the console about an empty plan: the notes saying the data leaves nothing to plan (far
    base stations, far users: :func:`siting.preflight.console_warnings`), else the report's empty-plan reason."""
    import json

    from .preflight import console_warnings

    if len(result.plan.chosen):
        return []
    lines = console_warnings(result.notes)
    if lines:
        return lines
    path = result.outputs.get("run_json")
    try:
        reason = json.loads(Path(path).read_text(encoding="utf-8"))["summary"]["empty_plan_reason"] if path else ""
    except (OSError, ValueError, KeyError, TypeError):
        reason = ""
    return [f"the plan is empty: {reason}" if reason else "the plan is empty; see the report for why"]


def _prepare() -> int:
    """Compile the kernels into numba's cache (:func:`siting._warmup.prepare`) and say what was done."""
    import time

    from ._warmup import prepare

    t0 = time.perf_counter()
    groups = prepare()
    if groups:
        print(f"compiled the kernels ({', '.join(groups)}) in {time.perf_counter() - t0:.1f} s; jobs now load "
              "them from numba's cache")  # fmt: skip
    else:
        print("the kernels are compiled already; nothing to do")
    return 0


def _say(args):
    return (lambda line: None) if args.quiet else (lambda line: print(line, flush=True))


def _batch(args) -> int:
    """Several jobs (or a folder): the resumable queue of :mod:`siting.batch`; exit code of the worst job."""
    from .batch import run_batch, summary_text

    result = run_batch(args.job, args.overrides, queue_file=args.queue, fresh=args.fresh, workers=args.workers,
                       scheduler=args.scheduler, progress=bool(args.progress) and not args.quiet, log=_say(args),
                       parallel=args.parallel, overwrite=args.overwrite)
    if not args.quiet:
        print(summary_text(result))
    for row in result.rows:
        if row["status"] == "failed":
            print(f"siting: error in {row['job']}: {row['error']}", file=sys.stderr)
    return result.exit_code


def _scenarios(args, path) -> int:
    """A job with scenarios (:mod:`siting.scenarios`); exit code of the worst scenario."""
    from .scenarios import run_scenarios

    result = run_scenarios(path, args.overrides, fresh=args.fresh, workers=args.workers, scheduler=args.scheduler,
                           progress=bool(args.progress) and not args.quiet, log=_say(args), parallel=args.parallel,
                           overwrite=args.overwrite)
    for r in result.runs:
        if not r.ok:
            print(f"siting: scenario {r.name} failed: {r.error}", file=sys.stderr)
    if not args.quiet:
        print(f"comparison in {result.files.get('scenarios_md', '-')}")
    return result.exit_code


if __name__ == "__main__":
    sys.exit(main())
