"""The command line: a thin shell over the Python API.

It parses arguments, calls the same functions a notebook user calls, prints a
short summary and maps our errors to exit code 2 with one clear paragraph.
"""

from __future__ import annotations

import sys
from pathlib import Path

import click

from . import __version__
from .errors import CalibrateError

EXIT_USER_ERROR = 2


EXIT_SIGNAL_BASE = 128  # the shell's convention: killed by signal N exits 128 + N


def echo(message: object = "", *, err: bool = False) -> None:
    """Every line the command line prints goes through here: control and bidi characters
    (from ids, file names or messages) are shown as escapes, never sent raw."""
    from .safe_files import terminal_text

    click.echo(terminal_text(message), err=err)


def shown(value: object) -> str:
    """One value (a rater id, a path) for a printed line: newlines escaped too."""
    from .safe_files import terminal_text

    return terminal_text(value, keep_lines=False)


def _fail(exc: CalibrateError) -> None:
    echo(f"calibrate: {exc}", err=True)
    sys.exit(EXIT_USER_ERROR)


class Stopped(KeyboardInterrupt):
    """Raised by the SIGTERM handler so that every ``with`` block cleans up on the way out."""

    def __init__(self, signum: int):
        super().__init__(signum)
        self.signum = signum


FORCED_EXIT_AFTER_S = 20  # an unwinding that hangs (a library catching the signal) is cut short


def _raise_stopped(signum, frame) -> None:
    """SIGTERM: unwind through every ``with`` block, with a backstop if the unwinding hangs.

    The backstop is an interval timer (SIGALRM), not a thread: starting a thread inside a
    signal handler takes threading's internal lock, and if the signal lands while the main
    thread holds that lock (starting the pool's manager or queue-feeder thread, or tqdm's
    monitor), the handler deadlocks and the backstop itself never starts -- the likely
    cause of the one hang seen with the former 20 s timer thread.
    """
    import signal

    if hasattr(signal, "setitimer"):
        signal.signal(signal.SIGALRM, lambda *_: _forced_exit(signum))
        signal.setitimer(signal.ITIMER_REAL, FORCED_EXIT_AFTER_S)
    raise Stopped(signum)


def _forced_exit(signum: int) -> None:
    """The orderly unwinding did not finish: remove staging folders, stop children, exit."""
    import os
    import signal

    from .output.folder import remove_active_staging

    remove_active_staging()
    for child in _child_pids():
        try:
            os.kill(child, signal.SIGTERM)
        except OSError:
            pass
    os._exit(EXIT_SIGNAL_BASE + int(signum))


def _child_pids() -> list[int]:
    import os
    from pathlib import Path as _Path

    pids: list[int] = []
    for task in _Path(f"/proc/{os.getpid()}/task").glob("*"):
        try:
            pids += [int(c) for c in (task / "children").read_text().split()]
        except (OSError, ValueError):
            pass
    return pids


class _Group(click.Group):
    """Turns any CalibrateError into a clear message and exit code 2, never a traceback;
    SIGTERM and Ctrl-C unwind (removing staging folders) and exit 128 + the signal."""

    def invoke(self, ctx):
        import signal

        try:
            previous = signal.signal(signal.SIGTERM, _raise_stopped)
        except ValueError:  # not the main thread (embedded use): leave signals alone
            previous = None
        try:
            return super().invoke(ctx)
        except CalibrateError as exc:
            _fail(exc)
        except KeyboardInterrupt as exc:
            signum = exc.signum if isinstance(exc, Stopped) else signal.SIGINT
            echo("calibrate: stopped before the end; no output was replaced and no partial "
                       "output was left behind.", err=True)
            sys.exit(EXIT_SIGNAL_BASE + int(signum))
        except OSError as exc:  # a last net: a file problem is the user's to fix, not a crash
            where = f" ({exc.filename})" if exc.filename else ""
            echo(f"calibrate: a file could not be read or written{where}: "
                       f"{exc.strerror or exc}. Check the path and its permissions.", err=True)
            sys.exit(EXIT_USER_ERROR)
        finally:
            if previous is not None:
                signal.signal(signal.SIGTERM, previous)


def _check_source_date_epoch() -> None:
    """SOURCE_DATE_EPOCH (reproducible builds) must be a whole number of seconds a date can hold."""
    import datetime as dt
    import os

    raw = os.environ.get("SOURCE_DATE_EPOCH")
    if raw is None or raw.strip() == "":
        return
    try:
        dt.datetime.fromtimestamp(int(raw.strip()), tz=dt.timezone.utc)
    except (ValueError, OverflowError, OSError):
        raise CalibrateError(
            f"SOURCE_DATE_EPOCH={raw!r} is not a usable date: give whole seconds since "
            "1970-01-01 UTC (for example 1700000000), or unset it.") from None


@click.group(cls=_Group, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="calibrate")
def main() -> None:
    """Audit a panel of raters: capture each rater's policy, measure consistency and
    agreement, and write private feedback reports.

    Start with 'calibrate demo' for an invented example, or 'calibrate init' on your own
    judgments table.
    """


@main.command()
@click.option("--out", "out", default="demo_data", show_default=True, type=click.Path(path_type=Path),
              help="Folder to write the demo study into.")
@click.option("--force", is_flag=True, help="Write even if the folder already holds a study.toml.")
def demo(out: Path, force: bool) -> None:
    """Write the invented demo study (tables, spec and a README of its planted truths)."""
    from .data.demo import write_demo

    if out.exists() and not out.is_dir():
        raise CalibrateError(f"--out {out} is a file, not a folder; give a folder name for the demo "
                             "study, for example --out demo_data.")
    if (out / "study.toml").exists() and not force:
        echo(f"{out / 'study.toml'} already exists; leaving it as it is (add --force to rewrite).")
        return
    files = write_demo(out)
    echo(f"Wrote the demo study to {files.folder}/ (spec: {files.spec}).")
    echo(f"Next: calibrate check {files.spec}   then   calibrate audit {files.spec} --out reports/demo")


@main.command()
@click.argument("data", type=click.Path(path_type=Path))
@click.option("--out", "out", type=click.Path(path_type=Path), default=None,
              help="Where to write the draft spec [default: study.toml beside DATA].")
@click.option("--cases", "cases", type=click.Path(path_type=Path), default=None,
              help="A table of cues per case (one row per case), joined on the case id.")
@click.option("--name", default=None, help="Study name [default: from the file name].")
@click.option("--force", is_flag=True, help="Replace an existing spec file.")
def init(data: Path, out: Path | None, cases: Path | None, name: str | None, force: bool) -> None:
    """Draft a study spec from a judgments table (and a cases table), with comments to check."""
    import os

    from .data.ingest import read_table
    from .data.drafting import draft_spec
    from .errors import OutputExistsError
    from .safe_files import atomic_write_text

    if not data.is_file():
        raise CalibrateError(f"the table {data} does not exist.")
    out = out or data.with_name("study.toml")
    if out.is_dir():
        raise CalibrateError(f"--out {out} is a folder; give the spec's file name, for example "
                             f"--out {out / 'study.toml'}.")
    if out.exists() and out.resolve() == data.resolve():
        raise CalibrateError(f"--out {out} is the judgments table itself; give another file name "
                             "for the spec, for example study.toml.")
    if out.exists() and not force:
        raise OutputExistsError(f"{out} already exists; choose another --out or add --force.")
    if cases is not None and not cases.is_file():
        raise CalibrateError(f"the cases table {cases} does not exist.")
    table = read_table(data)
    if table.empty:
        raise CalibrateError(f"the table {data} has a header but no rows; init guesses the scale "
                             "and the cues from the data, so give it the table with its judgments.")
    rel = os.path.relpath(data.resolve(), out.resolve().parent)
    cases_table = cases_name = None
    if cases is not None:
        cases_table = read_table(cases)
        cases_name = Path(os.path.relpath(cases.resolve(), out.resolve().parent)).as_posix()
    text = draft_spec(table, data_name=Path(rel).as_posix(), study_name=name or data.stem,
                      cases=cases_table, cases_name=cases_name)
    atomic_write_text(out, text)
    echo(f"Wrote a draft spec to {out}. Check the lines marked CHECK, then run: calibrate check {out}")


@main.command()
@click.argument("spec", type=click.Path(path_type=Path))
def check(spec: Path) -> None:
    """Validate the data against the spec and describe it; exit 0 when it can be analysed, 2 when not."""
    from .data.ingest import inspect_study
    from .data.summary import format_summary, summarize

    table, problems = inspect_study(spec)
    errors = [p for p in problems if p.severity == "error"]
    warnings = [p for p in problems if p.severity == "warning"]
    if table is not None:
        echo(f"Study: {table.spec.name}")
        echo(format_summary(summarize(table)))
        echo("")
    if warnings:
        echo(f"{len(warnings)} warning(s):")
        for line in _warning_lines(warnings):
            echo(f"  - {line}")
    if errors:
        echo(f"{len(errors)} problem(s) stop the analysis:", err=True)
        for e in errors:
            echo(f"  - {e}", err=True)
        sys.exit(EXIT_USER_ERROR)
    echo("The data can be analysed.")


@main.command()
@click.argument("spec", type=click.Path(path_type=Path))
@click.option("--out", "out", required=True, type=click.Path(path_type=Path),
              help="Folder for the results (created; see --overwrite).")
@click.option("--overwrite", is_flag=True, help="Replace the output folder if it exists and holds "
              "an earlier calibrate output (never any other folder).")
@click.option("--seed", type=click.IntRange(min=0), default=None, help="Resampling seed [default: the spec's seed].")
@click.option("--no-pdf", "no_pdf", is_flag=True, help="Skip the PDF reports (results, tables and "
              "workbook only).")
@click.option("--jobs", type=click.IntRange(min=1), default=None,
              help="Worker processes for building the PDFs [default: the cores available].")
@click.option("--show-excluded-to-raters", "include_excluded", is_flag=True,
              help="Also print the excluded-attribute result in each rater's own report "
                   "(by default it stays in the chair's summary).")
@click.option("--pseudonymise", "--pseudonymize", "pseudonymise", is_flag=True,
              help="Replace every rater id by a stable code in every output (files, names, "
                   "terminal) and write the key (code -> id -> report) outside the folder.")
@click.option("--key-file", "key_file", type=click.Path(path_type=Path), default=None,
              help="Where the pseudonym key is kept (read again on a rerun, so codes stay) "
                   "[default: OUT-key.csv beside OUT].")
@click.option("--memory-limit", "memory_limit", type=click.FloatRange(min=0, min_open=True), default=None,
              help="GB of memory the audit may use; a panel estimated to need more is refused "
                   "before the analysis starts [default: this machine's memory].")
@click.option("--full-extras", "full_extras", is_flag=True,
              help="Run the heavy extras in full on any panel size (large panels otherwise get "
                   "fewer resamples for grouping stability and no pair-level grouping table; "
                   "results.json states each reduction).")
def audit(spec: Path, out: Path, overwrite: bool, seed: int | None, no_pdf: bool, jobs: int | None,
          include_excluded: bool, pseudonymise: bool, key_file: Path | None,
          memory_limit: float | None, full_extras: bool) -> None:
    """Run the full audit and write results, tables, a workbook and PDF reports into OUT."""
    from tqdm import tqdm

    from .analyses import audit as run_audit
    from .data.ingest import load_study
    from .data.spec import read_spec
    from .output.folder import OutputFolder
    from .writing import write_audit_files

    if not no_pdf:
        _check_source_date_epoch()
    if key_file is not None and not pseudonymise:
        raise CalibrateError("--key-file is the key of a pseudonymised audit; add --pseudonymise "
                             "(or leave --key-file out).")
    study = read_spec(spec)
    # Inputs the output may not contain or sit above: replacing it would delete them.
    protect = (spec, spec.resolve().parent, *(d.path for d in study.data),
               *([study.cases] if study.cases is not None else []))
    folder = OutputFolder(out, overwrite=overwrite, protect=protect)  # refuse early, before any work
    key = _open_key(key_file, out, protect) if pseudonymise else None
    with folder as staging:  # holds the lock through the analysis; cleans up on any exit
        table = load_study(study)
        from .output.limits import memory_refusal, space_refusal

        refusal = memory_refusal(table, memory_limit) or space_refusal(
            table, staging.parent, shown(out), pdf=not no_pdf)
        if refusal is not None:
            raise CalibrateError(refusal)
        if key is not None:
            from .output.pseudonyms import pseudonymise_table

            table, _codes = pseudonymise_table(table, key)
        for line in _warning_lines(table.warnings):
            echo(f"warning: {line}", err=True)
        with tqdm(desc="analyses", unit=" step", leave=False, disable=None, file=sys.stderr) as bar:
            def step(name: str) -> None:
                bar.set_postfix_str(name)
                bar.update(1)

            result = run_audit(table, seed=seed, progress=step, full_extras=full_extras)
        bar_pdf = tqdm(desc="reports", unit=" pdf", leave=False, disable=None if not no_pdf else True,
                       file=sys.stderr)

        def wrote(done: int, total: int, name: str) -> None:
            bar_pdf.total = total
            bar_pdf.update(done - bar_pdf.n)

        if jobs is None:
            from .threads import available_cores

            jobs = available_cores()
        try:
            write_audit_files(result, staging, pdf=not no_pdf, jobs=jobs,
                              include_excluded=include_excluded, progress=wrote, shown=out,
                              pseudonymise=key)
        finally:
            bar_pdf.close()
    _print_audit_summary(result, out, no_pdf, key)


def _open_key(key_file: Path | None, out: Path, protect: tuple[Path, ...]):
    """The pseudonym key to use: never inside the results folder, never one of the inputs."""
    import os

    from .output.pseudonyms import PseudonymKey, default_key_path

    path = Path(os.path.abspath(key_file)) if key_file is not None else default_key_path(out)
    final = Path(os.path.abspath(out))
    if path == final or final in path.parents:
        raise CalibrateError(f"--key-file {shown(key_file)} is inside --out {shown(out)}; the key must "
                             "be kept apart from the results it unlocks. Give a path outside it, "
                             f"for example {shown(default_key_path(out))}.")
    if any(path == Path(os.path.abspath(p)) for p in protect) or path.is_dir():
        raise CalibrateError(f"--key-file {shown(path)} is a folder or one of the study's inputs; "
                             "give a new file name for the key.")
    return PseudonymKey.open(path)


def _warning_lines(problems) -> list[str]:
    """Data warnings, one line per kind with its count and a few examples (never one line
    per rater and case); every warning stays in results.json and the notes table."""
    from .notes import group_notes

    return [group.line() for group in group_notes(p.to_dict() for p in problems)]


#: Flags from the most serious to the least, for the few raters the command line names: the
#: tested flags and rules first, then the data conditions (what the data allow, not a
#: pattern of the rater). Our own order.
FLAG_ORDER = ("excluded_attribute", "inconsistent", "low_retest", "drift", "cutoff_rule", "curvature",
              "lenient", "severe", "narrow_range", "wide_range", "central_tendency",
              "not_fitted", "too_few_cases", "separation", "collinear_cues", "few_cases")
DATA_CONDITIONS = frozenset({"not_fitted", "too_few_cases", "separation", "collinear_cues", "few_cases"})
MOST_RATERS_NAMED = 5


def _flag_rank(flag: str) -> int:
    return FLAG_ORDER.index(flag) if flag in FLAG_ORDER else len(FLAG_ORDER)


def _flag_lines(raters, named_phases: bool) -> list[str]:
    """One line per flag with how many raters carry it, then at most five raters with the most
    serious flags, then where the full list is."""
    from .report.wording import flag_words

    counts: dict[str, int] = {}
    for e in raters:
        for flag in e["flags"]:
            counts[flag] = counts.get(flag, 0) + 1
    if not counts:
        return ["No rater was flagged."]
    what = "raters carrying each, counted once per phase" if named_phases else "raters carrying each"
    lines = [f"Flags ({what}; see the README for what each means):"]
    for flag in sorted(counts, key=lambda f: (_flag_rank(f), f)):
        lines.append(f"  {counts[flag]:>5}  {flag_words(flag)} [{flag}]")
    by_rater: dict[str, tuple[set, list]] = {}  # rater -> (flags beyond data conditions, phases)
    for e in raters:
        beyond = {f for f in e["flags"] if f not in DATA_CONDITIONS}
        if beyond:
            flags, phases = by_rater.setdefault(e["rater"], (set(), []))
            flags |= beyond
            phases.append(e["phase"])
    serious = sorted(by_rater.items(), key=lambda item: (min(map(_flag_rank, item[1][0])), -len(item[1][0])))
    if serious:
        lines.append("Raters with the most serious flags" + (f" ({MOST_RATERS_NAMED} of {len(serious)} shown)"
                                                           if len(serious) > MOST_RATERS_NAMED else "") + ":")
        for rater, (flags, phases) in serious[:MOST_RATERS_NAMED]:
            phase_part = f" ({', '.join(map(shown, phases))})" if named_phases else ""
            lines.append(f"  {shown(rater)}{phase_part}: " + "; ".join(flag_words(f) for f in
                                                                      sorted(flags, key=_flag_rank)))
    else:
        lines.append("Only data conditions were flagged (what the data allow, not a pattern of any rater).")
    lines.append("Every rater's flags: the flags column of tables/raters.csv (and the workbook's raters sheet).")
    return lines


def _print_audit_summary(result, out: Path, no_pdf: bool, key) -> None:
    n_raters = len({e["rater"] for e in result.raters})
    from .data.ingest import UNNAMED_PHASE

    named_phases = tuple(result.phases) != (UNNAMED_PHASE,)
    echo(f"Audited {n_raters} raters" + (f" over {len(result.phases)} phase(s): "
                                         f"{', '.join(shown(p) for p in result.phases)}."
                                         if named_phases else "."))
    for line in _flag_lines(result.raters, named_phases):
        echo(line)
    if result.warnings:
        from .notes import group_notes

        kinds = len(group_notes(result.warnings))
        summary = "" if no_pdf else "one line per kind in the panel summary's data-quality section, "
        echo(f"Notes: {len(result.warnings)} from reading and fitting the data, of {kinds} kind(s); "
             f"{summary}every note in tables/notes.csv.")
    where = shown(out)
    echo(f"Results: {where}/results.json; tables in {where}/tables/; workbook {where}/audit.xlsx")
    if not no_pdf:
        echo(f"Reports: {where}/panel-summary.pdf and one private report per rater in {where}/raters/"
             f" ({where}/index.csv names each rater's file)")
    if key is not None:
        echo(f"Pseudonymised: the outputs name raters by code only. The key (code -> rater -> "
             f"report) is {shown(key.path)}; keep it apart from the results. A rerun reads it "
             "again (from the same place, or give --key-file), so every rater keeps their code.")


@main.command()
@click.argument("spec", type=click.Path(path_type=Path))
@click.option("--out", "out", required=True, type=click.Path(path_type=Path),
              help="Folder for the comparison (created; see --overwrite).")
@click.option("--overwrite", is_flag=True, help="Replace the output folder if it exists.")
@click.option("--seed", type=int, default=None, help="Resampling seed [default: the spec's seed].")
@click.option("--no-pdf", "no_pdf", is_flag=True, help="Skip training-report.pdf.")
@click.option("--jobs", type=click.IntRange(min=1), default=None,
              help="Phases resampled at once [default: the cores available]; the result is the same.")
def compare(spec: Path, out: Path, overwrite: bool, seed: int | None, no_pdf: bool,
            jobs: int | None) -> None:
    """Compare phases (before and after a training): each rater's change, and trained against controls."""
    from .data.ingest import load_study
    from .output.folder import OutputFolder
    from .training import compare as run_compare
    from .writing import write_comparison

    OutputFolder(out, overwrite=overwrite)  # refuse early, before any work
    table = load_study(spec)
    for line in _warning_lines(table.warnings):
        echo(f"warning: {line}", err=True)
    result = run_compare(table, seed=seed, jobs=jobs)
    write_comparison(result, out, overwrite=overwrite, pdf=not no_pdf)
    n_trained = sum(r.trained for r in result.raters)
    echo(f"Compared {len(result.raters)} raters over phases {', '.join(result.phases)} "
               f"({n_trained} trained, {len(result.raters) - n_trained} controls).")
    if result.unmatched:
        echo("Not in every phase (left out): "
                   + ", ".join(u["rater"] for u in result.unmatched))
    for caution in result.cautions:
        echo(f"  - {caution}")
    for line in result.summary:
        echo(line)
    echo(f"Results: {out}/comparison.json; tables in {out}/tables/; workbook {out}/comparison.xlsx"
               + ("" if no_pdf else f"; report {out}/training-report.pdf"))


if __name__ == "__main__":  # pragma: no cover
    main()


@main.command()
@click.argument("policies", type=click.Path(path_type=Path))
@click.argument("files", type=click.Path(path_type=Path))
@click.option("--rater", "rater", default=None,
              help="Whose policy to apply: a rater's name, or 'panel' for the mean of the raters' policies.")
@click.option("--group", "group", default=None,
              help="Apply a group's common policy instead (its label, e.g. A, from the audit's grouping).")
@click.option("--phase", default=None, help="Which phase's policies [default: the first].")
@click.option("--file-column", default="file", show_default=True,
              help="The column of FILES that names each file.")
@click.option("--out", "out", type=click.Path(path_type=Path), default=None,
              help="Where to write the scores (CSV) [default: scores.csv beside FILES].")
@click.option("--overwrite", is_flag=True, help="Replace an existing scores file.")
def score(policies: Path, files: Path, rater: str | None, group: str | None, phase: str | None,
          file_column: str, out: Path | None, overwrite: bool) -> None:
    """Apply a captured policy (from an audit's policies.json) to new files: predicted
    judgment, 95% prediction interval, each cue's contribution, and cues outside the
    range the policy was fitted on."""
    from .data.ingest import read_table
    from .design.score import GROUP_PREFIX, load_policies, score_files
    from .errors import OutputExistsError
    from .safe_files import atomic_write_text, escape_formula

    if (rater is None) == (group is None):
        raise CalibrateError("say whose policy to apply: --rater NAME (or --rater panel), or --group LABEL.")
    if not files.is_file():
        raise CalibrateError(f"the files table {files} does not exist.")
    out = out or files.with_name("scores.csv")
    if out.exists() and not overwrite:
        raise OutputExistsError(f"{out} already exists; add --overwrite to replace it.")
    new_files = read_table(files, id_columns=(file_column,))  # a file id "NA" is an id
    scored = score_files(load_policies(policies), new_files, policy=rater or GROUP_PREFIX + group, phase=phase,
                         file_column=file_column, source=files.name)
    frame = scored.to_frame().map(escape_formula)
    atomic_write_text(out, frame.to_csv(index=False, lineterminator="\n"))
    n_out = sum(1 for cues in scored.outside_range if cues)
    whose = f"the policy of '{rater}'" if rater else f"the common policy of group '{group}'"
    echo(f"Scored {len(scored.files)} file(s) with {whose} (phase '{scored.phase}'): {out}")
    if n_out:
        echo(f"{n_out} file(s) have cues outside the range the policy was fitted on; "
                   "their predictions extrapolate (see the outside_fitted_range column).")


def _rater_names(raters: str) -> list[str]:
    """'6' gives rater01..rater06; otherwise a comma-separated list of names."""
    if raters.strip().isdigit():
        n = int(raters)
        return [f"rater{i:0{max(2, len(str(n)))}d}" for i in range(1, n + 1)]
    return [r.strip() for r in raters.split(",") if r.strip()]


@main.command()
@click.argument("pool", type=click.Path(path_type=Path))
@click.option("--raters", required=True, help="How many raters (e.g. 6), or their names, comma separated.")
@click.option("--files-per-rater", type=int, required=True, help="Distinct files each rater reads.")
@click.option("--repeat-share", type=float, default=0.15, show_default=True,
              help="Share of each rater's files shown a second time, under a new code.")
@click.option("--repeat-distance", type=int, default=5, show_default=True,
              help="Least number of positions between a file's two showings.")
@click.option("--readers-per-file", type=int, default=None,
              help="Each file read by this many raters (a linked design) [default: every rater reads every file].")
@click.option("--choose", type=click.Choice(["uncorrelated", "spread", "representative"]), default="uncorrelated",
              show_default=True, help="How files are chosen from the pool (see README).")
@click.option("--file-column", default="file", show_default=True, help="The column of POOL naming each file.")
@click.option("--cues", default=None, help="Cue columns, comma separated [default: every other column].")
@click.option("--seed", type=int, default=0, show_default=True, help="Seed: the same seed gives the same plan.")
@click.option("--out", "out", type=click.Path(path_type=Path), required=True, help="Folder for packets and key.")
@click.option("--overwrite", is_flag=True, help="Replace the files of an earlier plan in the folder.")
def plan(pool: Path, raters: str, files_per_rater: int, repeat_share: float, repeat_distance: int,
         readers_per_file: int | None, choose: str, file_column: str, cues: str | None, seed: int,
         out: Path, overwrite: bool) -> None:
    """Plan a rating exercise from a pool of files: choose the files, hide repeats,
    write one packet per rater and the key."""
    from .data.ingest import read_table
    from .design.packets import write_plan
    from .design.plan import plan_exercise

    if not pool.is_file():
        raise CalibrateError(f"the pool {pool} does not exist.")
    pool_table = read_table(pool, id_columns=(file_column,))  # a file id "NA" is an id
    result = plan_exercise(pool_table, _rater_names(raters), files_per_rater, file_column=file_column,
                           cues=[c.strip() for c in cues.split(",")] if cues else None,
                           repeat_share=repeat_share, readers_per_file=readers_per_file,
                           min_gap=repeat_distance, method=choose, seed=seed, source=pool.name)
    write_plan(result, out, overwrite=overwrite)
    echo(f"Planned {len(result.files)} files for {len(result.packets)} raters ({choose}); "
               f"packets and key in {out}/ (keep key.csv away from the raters).")
    echo(f"Largest correlation between cues: {result.max_abs_correlation():.2f} in the chosen files, "
               f"{result.max_abs_correlation(False):.2f} in the pool; {result.files_per_weight:.1f} files per weight.")
    echo(f"For a typical rater (R_s 0.80) the 95% interval of R_s will be about {result.rs_interval_width:.2f} "
         f"wide; a before/after change in R_s smaller than {result.rs_detectable_change:.2f} could go unseen "
         "(80% power, 5% two-sided).")
    echo(result.to_frame().to_string(index=False, float_format=lambda v: f"{v:.2f}"))


@main.command()
@click.argument("plan_folder", type=click.Path(path_type=Path))
@click.argument("packets", nargs=-1, required=True, type=click.Path(path_type=Path))
@click.option("--scale", type=click.Choice(["continuous", "ordinal", "binary"]), default="ordinal",
              show_default=True, help="The judgment scale.")
@click.option("--min", "scale_min", type=float, default=1, show_default=True, help="Lowest allowed judgment.")
@click.option("--max", "scale_max", type=float, default=7, show_default=True, help="Highest allowed judgment.")
@click.option("--name", default="Collected packets", show_default=True, help="Study name for the spec.")
@click.option("--out", "out", type=click.Path(path_type=Path), required=True,
              help="Folder for judgments.csv, files.csv and study.toml.")
@click.option("--overwrite", is_flag=True, help="Replace files collected earlier into the folder.")
def collect(plan_folder: Path, packets: tuple[Path, ...], scale: str, scale_min: float, scale_max: float,
            name: str, out: Path, overwrite: bool) -> None:
    """Read completed packets (CSV or XLSX) against the plan's key and write a study
    that 'calibrate audit' runs on directly."""
    from .design.collect import collect_packets, write_collected

    collected = collect_packets(plan_folder, list(packets), scale=scale, scale_min=scale_min, scale_max=scale_max)
    spec = write_collected(collected, out, name=name, overwrite=overwrite)
    for warning in collected.warnings:
        echo(f"Note: {warning}")
    echo(f"Read {len(collected.judgments)} judgments from {len(packets)} packet(s); "
               f"next: calibrate audit {spec} --out REPORTS")
