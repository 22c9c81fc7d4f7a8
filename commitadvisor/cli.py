"""The command line: each command parses, loads, calls one function and renders.

Known input errors end with one clear message per problem and exit status 2. Heavy modules
(scipy, the models, rich tables) are imported inside the commands, so ``--help`` is fast.
"""

from __future__ import annotations

import sys
from enum import StrEnum
from pathlib import Path
from typing import Annotated, NoReturn

import typer

from commitadvisor import __version__
from commitadvisor.errors import InputError

app = typer.Typer(
    name="commitadvisor",
    help=(
        "Advise how database commits should become durable. Reads one case file (workload, "
        "loss tolerance, log devices, strategies) and computes, per strategy and load regime, "
        "the commit response time, the exposure window and the loss on a crash. Start with "
        "'commitadvisor new-case my.toml', edit it, then 'commitadvisor check my.toml'."
    ),
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    rich_markup_mode=None,
)

EXIT_INPUT = 2

CaseArg = Annotated[Path, typer.Argument(help="The case file (.toml or .json).",
                                         show_default=False)]
NoColor = Annotated[bool, typer.Option("--no-color", help="Plain text, no colour.")]


class Fmt(StrEnum):
    table = "table"
    json = "json"


def _fail(exc: InputError) -> NoReturn:
    sys.stderr.write(exc.render() + "\n")
    raise typer.Exit(EXIT_INPUT)


def _load(path: Path):
    from commitadvisor.case import load_case

    try:
        return load_case(path)
    except InputError as exc:
        _fail(exc)


def _version(value: bool) -> None:
    if value:
        typer.echo(f"commitadvisor {__version__}")
        raise typer.Exit()


@app.callback()
def _root(
    version: Annotated[bool, typer.Option("--version", callback=_version, is_eager=True,
                                          help="Print the version and exit.")] = False,
) -> None:
    """Advise how database commits should become durable."""


@app.command()
def check(case: CaseArg, no_color: NoColor = False) -> None:
    """Validate a case file and summarise what it says.

    Prints the workload, each regime with its share of time, each log device's flush p50 and
    p99 per regime (ms), its stalls and bandwidth, and the strategies. Exit status 2 and one
    line per problem (file, field, what is wrong) when the case is not valid.
    """
    from commitadvisor.render.check import render_summary
    from commitadvisor.render.console import make_console
    from commitadvisor.summary import summarise

    c = _load(case)
    render_summary(make_console(no_color), str(case), summarise(c))


@app.command()
def schema(
    out: Annotated[Path | None, typer.Option("--out", help="Write to this file instead of "
                                             "standard output.")] = None,
) -> None:
    """Print the case file's JSON Schema (for editors that complete and check fields)."""
    import json

    from commitadvisor.case import case_json_schema
    from commitadvisor.files import write_atomically

    text = json.dumps(case_json_schema(), indent=2, sort_keys=True) + "\n"
    if out is None:
        sys.stdout.write(text)
    else:
        write_atomically(out, text, force=True)


@app.command("new-case")
def new_case(
    path: Annotated[Path, typer.Argument(help="Where to write the starter case (.toml).")],
    force: Annotated[bool, typer.Option("--force", help="Overwrite an existing file.")] = False,
) -> None:
    """Write a commented starter case that passes 'check'; edit its figures to your own."""
    from commitadvisor.files import starter_case_text, write_atomically

    try:
        write_atomically(path, starter_case_text(), force=force)
    except FileExistsError:
        sys.stderr.write(f"{path}: exists already; use --force to overwrite it\n")
        raise typer.Exit(EXIT_INPUT) from None
    except OSError as exc:
        sys.stderr.write(f"{path}: cannot be written: {exc.strerror or exc}\n")
        raise typer.Exit(EXIT_INPUT) from None
    typer.echo(f"wrote {path}; next: commitadvisor check {path}")


# --------------------------------------------------------------- profiles from measurements


class Unit(StrEnum):
    us = "us"
    ms = "ms"
    s = "s"


class FitFormat(StrEnum):
    table = "table"
    toml = "toml"


class FlushCall(StrEnum):
    fdatasync = "fdatasync"
    fsync = "fsync"
    o_dsync = "o-dsync"


def _fail_file(path: Path, exc: Exception) -> NoReturn:
    """One message naming the file (the readers' messages already do), exit status 2."""
    message = str(exc)
    if not message.startswith(str(path)):
        message = f"{path}: {message}"
    sys.stderr.write(message + "\n")
    raise typer.Exit(EXIT_INPUT)


_FIT_PROFILE_HELP = (
    "Fit latency profiles to measurements and print a profile entry ready to paste.\n\n"
    "Fits lognormal, gamma, Weibull and a mixture (fast body plus a share of slow outliers) "
    "by maximum likelihood, compares them (Kolmogorov-Smirnov statistic, AIC) with the data's "
    "p50, p99, p99.9 and mean (ms), chooses the lowest AIC and prints its entry in the case "
    "file's profile format (times in ms). Exit status 2 with one message naming the file when "
    "it cannot be read or fitted."
)


@app.command("fit-profile", help=_FIT_PROFILE_HELP)
def fit_profile(
    samples: Annotated[Path, typer.Argument(
        help="CSV file of measured latencies, one value per line (or, with --histogram, lines "
             "'upper_bound,cumulative_count'). Blank lines and lines starting with '#' are "
             "skipped; one header line is allowed.", show_default=False)],
    unit: Annotated[Unit | None, typer.Option(
        "--unit", help="Unit of the values (or of the histogram's upper bounds): us, ms or s. "
                       "Default: the unit the file declares in a '# unit: ...' line, as "
                       "'measure' writes it; required when the file declares none.")] = None,
    histogram: Annotated[bool, typer.Option(
        "--histogram", help="The file is a cumulative histogram (bucket upper bounds "
                            "ascending, the last may be inf; counts cumulative); fit by "
                            "interval-censored likelihood.")] = False,
    fmt: Annotated[FitFormat, typer.Option(
        "--format", help="table: the comparison of all fits, then the profile entry; toml: "
                         "only the one-line profile entry of the chosen fit.")] = FitFormat.table,
    no_color: NoColor = False,
) -> None:
    """Fit latency profiles to a samples or histogram file; see _FIT_PROFILE_HELP."""
    from commitadvisor.fitting import fit_cumulative_histogram, fit_samples, profile_entry_toml
    from commitadvisor.measure_io import declared_unit, read_histogram_csv, read_samples_csv

    try:
        unit_name = unit.value if unit is not None else declared_unit(samples)
        if unit_name is None:
            raise ValueError("the file does not declare its unit (no '# unit: ...' line); "
                             "give --unit us, ms or s")
        if histogram:
            report = fit_cumulative_histogram(*read_histogram_csv(samples, unit_name))
        else:
            report = fit_samples(read_samples_csv(samples, unit_name))
    except ValueError as exc:
        _fail_file(samples, exc)
    if fmt is FitFormat.toml:
        typer.echo(profile_entry_toml(report.best))
    elif no_color or not sys.stdout.isatty():
        from commitadvisor.render.fit import fit_report_plain

        typer.echo(fit_report_plain(report), nl=False)
    else:
        from commitadvisor.render.console import make_console
        from commitadvisor.render.fit import render_fit_report

        render_fit_report(report, make_console(no_color))


_MEASURE_HELP = (
    "Time write + flush on the device behind DIRECTORY and summarise it in µs.\n\n"
    "Writes real data: first a scratch file is filled and flushed, then each timed write of "
    "--block-bytes overwrites it in place (or appends, with --append) and is flushed with "
    "--flush-call. Prints p50, p90, p99, p99.9, max and mean (µs) and warns when flushes are "
    "too fast to tell durable from ignored. Exit status 2 with one message on a bad directory "
    "or setting, 130 when interrupted (the scratch file is removed either way)."
)


@app.command("measure", help=_MEASURE_HELP)
def measure(
    directory: Annotated[Path, typer.Argument(
        help="An existing writable directory on the device to test (the log's device). A "
             "scratch file is written there and removed afterwards.", show_default=False)],
    block_bytes: Annotated[int, typer.Option(
        "--block-bytes", min=1, help="Bytes per timed write; use the log's write size.")] = 8192,
    count: Annotated[int | None, typer.Option(
        "--count", min=1, help="Number of timed writes (default 1000). Not with "
                               "--duration.")] = None,
    duration: Annotated[float | None, typer.Option(
        "--duration", help="Keep writing for this many seconds instead of a fixed "
                           "count.")] = None,
    flush_call: Annotated[FlushCall, typer.Option(
        "--flush-call", help="How each write is made durable: fdatasync (the data and what is "
                             "needed to read it back), fsync (the data and all metadata), "
                             "o-dsync (each write on a file opened with O_DSYNC)."
    )] = FlushCall.fdatasync,
    append: Annotated[bool, typer.Option(
        "--append", help="Append to a growing file instead of overwriting a prefilled one in "
                         "place; each flush then also records the new file size, which can "
                         "cost about twice as much.")] = False,
    out: Annotated[Path | None, typer.Option(
        "--out", help="Write the samples (µs, one per line, with a '# unit: us' line) to this "
                      "CSV file, ready for fit-profile.")] = None,
    no_color: NoColor = False,
) -> None:
    """Measure write + flush latency on a directory's device; see _MEASURE_HELP."""
    from commitadvisor.measure import (
        check_measure_directory,
        measure_flush_latency,
        write_samples_csv,
    )
    from commitadvisor.render.console import make_console
    from commitadvisor.render.measure import (
        measure_progress,
        render_measure_notice,
        render_measure_result,
    )

    if count is not None and duration is not None:
        sys.stderr.write("give either --count or --duration, not both\n")
        raise typer.Exit(EXIT_INPUT)
    try:
        check_measure_directory(directory)
    except ValueError as exc:
        _fail_file(directory, exc)
    if out is not None and not out.parent.is_dir():
        _fail_file(out, ValueError("its directory does not exist"))
    console = make_console(no_color)
    render_measure_notice(console, str(directory))
    try:
        with measure_progress(console, "write + flush") as progress:
            result = measure_flush_latency(
                directory, block_bytes=block_bytes, count=count, duration_s=duration,
                flush_call=flush_call.value, append=append, progress=progress)
    except ValueError as exc:
        _fail_file(directory, exc)
    except OSError as exc:
        _fail_file(directory, ValueError(f"a write or flush failed: {exc.strerror or exc}"))
    except KeyboardInterrupt:
        sys.stderr.write("interrupted; the scratch file was removed\n")
        raise typer.Exit(130) from None
    if out is not None:
        try:
            write_samples_csv(out, result.samples_us)
        except OSError as exc:
            _fail_file(out, ValueError(f"cannot be written: {exc.strerror or exc}"))
    render_measure_result(console, result, None if out is None else str(out))


@app.command()
def evaluate(
    case: CaseArg,
    fmt: Annotated[Fmt, typer.Option("--format", help="table: one table per strategy, a row "
                                     "per regime; json: the documented evaluation document.")
                   ] = Fmt.table,
    verify: Annotated[bool, typer.Option("--verify", help="Also simulate the case and show "
                                         "analytic and simulated figures side by side with "
                                         "their relative difference; figures beyond the "
                                         "tolerance (mean 3 %, p99 5 %) are flagged.")] = False,
    seed: Annotated[int, typer.Option("--seed", min=0, help="Seed of the --verify "
                                      "simulation (same case and seed, same output).")] = 1,
    commits: Annotated[int | None, typer.Option("--commits", min=100, help="Measured commits "
                                                "per regime and strategy in the --verify "
                                                "simulation (default: the simulator's). "
                                                "Raise it where a tail rests on rare slow "
                                                "flushes or stalls: a flagged figure there "
                                                "can be the simulation's own noise.")
                       ] = None,
    no_color: NoColor = False,
) -> None:
    """Commit response time, exposure and loss per strategy and regime.

    Per strategy and regime, and blended over the cycle: commit acknowledgement latency
    (mean, p50, p90, p99, p99.9 in ms), the exposure window per kind of failure and the
    commits at risk, throughput, flushes per second, batch size and CPU use.
    """
    from commitadvisor.evaluate import evaluate as run

    c = _load(case)
    ev = run(c)
    comparison = None
    if verify:
        from commitadvisor.simulate import simulate_case
        from commitadvisor.verify import compare, mean_noise

        simulation = simulate_case(c, seed=seed, commits=commits)
        comparison = compare(ev, simulation.evaluation, noise=mean_noise(simulation))
    if fmt is Fmt.json:
        import json

        from commitadvisor.render.evaluate import render_json
        from commitadvisor.render.verify import comparison_plain

        text = render_json(ev)
        if comparison is not None:
            doc = json.loads(text)
            doc["verification"] = comparison_plain(comparison)
            text = json.dumps(doc, indent=2) + "\n"
        sys.stdout.write(text)
        return
    from commitadvisor.render.console import make_console
    from commitadvisor.render.evaluate import render_table

    console = make_console(no_color)
    render_table(console, ev)
    if comparison is not None:
        from commitadvisor.render.verify import render_comparison

        render_comparison(console, comparison)


class AdviseFormat(StrEnum):
    table = "table"
    json = "json"
    markdown = "markdown"


@app.command()
def advise(
    case: CaseArg,
    policy: Annotated[list[Path] | None, typer.Option(
        "--policy", help="An organisation rule file (TOML) that extends the built-in "
        "cautious baseline, switches off its rules or replaces it; repeatable, applied in "
        "order.", show_default=False)] = None,
    fmt: Annotated[AdviseFormat, typer.Option(
        "--format", help="table: for a terminal; markdown: a document; json: the documented "
        "advice document.")] = AdviseFormat.table,
    no_color: NoColor = False,
) -> None:
    """Rank the case's strategies under the recovery policy: a verdict for each (allowed,
    needs sign-off, not allowed) with every rule met or broken, commit and top-tier p99 per
    regime (ms), exposure and loss figures, and plain data-loss cautions with numbers."""
    from commitadvisor.evaluate import evaluate as run
    from commitadvisor.ranking import build_advice
    from commitadvisor.rules_file import load_policy_set
    from commitadvisor.stack import evaluate_stacks

    c = _load(case)
    try:
        policies = load_policy_set(list(policy or ()))
    except InputError as exc:
        _fail(exc)
    ev = run(c)
    advice = build_advice(c, ev, policies, evaluate_stacks(c, ev.strategies))
    if fmt is AdviseFormat.json:
        from commitadvisor.render.advise_json import render_json

        sys.stdout.write(render_json(advice))
        return
    if fmt is AdviseFormat.markdown:
        from commitadvisor.render.advise_text import render_markdown

        sys.stdout.write(render_markdown(advice))
        return
    from commitadvisor.render.advise import render_advice
    from commitadvisor.render.console import make_console

    render_advice(make_console(no_color), advice)


# --------------------------------------------------------------- benchmark review, sign-off
class ReviewFormat(StrEnum):
    text = "text"
    json = "json"
    markdown = "markdown"


@app.command("review-benchmark")
def review_benchmark(
    case: CaseArg,
    fmt: Annotated[ReviewFormat, typer.Option(
        "--format", help="text: for a terminal; json: the versioned review document; "
        "markdown: a section to paste into a review.")] = ReviewFormat.text,
    no_color: NoColor = False,
) -> None:
    """Review the case's [benchmark] section: what the same sessions reach with durable
    commits (synchronous and batched, per regime: commits/s, mean and p99 ms), how many
    acknowledged commits were at risk during a deferred-commit run (mean, peak and bound,
    with their value), whether the reported rate is possible with durable commits (the
    sessions, bandwidth and CPU bounds), and a verdict paragraph. Exit status 2 when the case
    has no [benchmark] section."""
    from commitadvisor.review import NoBenchmark
    from commitadvisor.review import review_benchmark as run

    c = _load(case)
    try:
        review = run(c)
    except NoBenchmark as exc:
        sys.stderr.write(f"{case}: {exc}\n")
        raise typer.Exit(EXIT_INPUT) from None
    if fmt is ReviewFormat.json:
        from commitadvisor.render.review import review_json

        sys.stdout.write(review_json(review))
        return
    if fmt is ReviewFormat.markdown:
        from commitadvisor.render.review import review_markdown

        sys.stdout.write(review_markdown(review))
        return
    from commitadvisor.render.console import make_console
    from commitadvisor.render.review import render_review_text

    render_review_text(make_console(no_color), review)


_SIGNOFF_HELP = (
    "Write a risk sign-off document (Markdown) for one strategy, for the recovery-policy "
    "owner.\n\n"
    "It states what is decided and leaves blank fields for the decision owner, the "
    "recovery-policy owner, the architect and the reviewer; records the SHA-256 of the case "
    "file and of each policy file, the tool's version and the seed; gives the per-regime "
    "figures (ms, commits/s, commits at risk) of the chosen strategy and of the best durable "
    "alternative, the exposure and loss in plain words, every rule met or broken, every "
    "caution, the simulator's check of the figures, the model's limits and the deferral to the "
    "organisation's recovery policy. The file is written atomically and never overwritten "
    "without --force. Exit status 2 for an unknown strategy (the names are listed), an "
    "existing file, or an input that cannot be used."
)


@app.command("signoff", help=_SIGNOFF_HELP)
def signoff(
    case: CaseArg,
    strategy: Annotated[str, typer.Option(
        "--strategy", help="The name of the strategy to sign off (as 'check' lists it).",
        show_default=False)],
    out: Annotated[Path, typer.Option(
        "--out", help="The Markdown file to write (its directory must exist).",
        show_default=False)],
    policy: Annotated[list[Path] | None, typer.Option(
        "--policy", help="An organisation rule file (TOML), as for 'advise'; repeatable.",
        show_default=False)] = None,
    force: Annotated[bool, typer.Option("--force", help="Overwrite an existing file.")] = False,
    seed: Annotated[int, typer.Option(
        "--seed", min=0, help="Seed of the simulator's check (recorded in the document).")] = 1,
    no_verify: Annotated[bool, typer.Option(
        "--no-verify", help="Skip the simulator's check; the document says it was "
        "skipped.")] = False,
) -> None:
    """Write a risk sign-off document; see _SIGNOFF_HELP."""
    from commitadvisor.files import write_atomically
    from commitadvisor.signoff import (
        PolicyFile,
        best_durable_alternative,
        build_signoff,
        sha256_hex,
    )

    c = _load(case)
    names = c.strategy_names()
    if strategy not in names:
        sys.stderr.write(f"{case}: no strategy is named '{strategy}'; the case's strategies "
                         f"are: {', '.join(names)}\n")
        raise typer.Exit(EXIT_INPUT)
    if out.exists() and not force:
        sys.stderr.write(f"{out}: exists already; use --force to overwrite it\n")
        raise typer.Exit(EXIT_INPUT)
    if not out.parent.is_dir():
        _fail_file(out, ValueError("its directory does not exist"))
    from commitadvisor.evaluate import evaluate as run
    from commitadvisor.ranking import build_advice
    from commitadvisor.rules_file import baseline_text, load_policy_set
    from commitadvisor.stack import evaluate_stacks

    try:
        policies = load_policy_set(list(policy or ()))
        files = tuple(PolicyFile(p.name, p.source, sha256_hex(
            baseline_text().encode("utf-8") if p.is_baseline else Path(p.source).read_bytes()))
            for p in policies.policies)
    except InputError as exc:
        _fail(exc)
    ev = run(c)
    advice = build_advice(c, ev, policies, evaluate_stacks(c, ev.strategies))
    alt = best_durable_alternative(advice, strategy)
    shown = (strategy,) if alt is None else (strategy, alt.name)
    verification = _signoff_verification(c, ev, seed, no_verify, shown)
    doc = build_signoff(
        c, case_file=str(case), case_sha256=sha256_hex(case.read_bytes()), policies=files,
        tool_version=__version__, seed=seed, strategy=strategy, evaluation=ev, advice=advice,
        verification=verification)
    from commitadvisor.render.signoff_md import signoff_markdown

    try:
        write_atomically(out, signoff_markdown(doc), force=force)
    except FileExistsError:
        sys.stderr.write(f"{out}: exists already; use --force to overwrite it\n")
        raise typer.Exit(EXIT_INPUT) from None
    except OSError as exc:
        _fail_file(out, ValueError(f"cannot be written: {exc.strerror or exc}"))
    typer.echo(f"wrote {out}")


def _signoff_verification(c, ev, seed: int, no_verify: bool, names: tuple[str, ...]):
    """The simulator's check of the figures of the strategies the sign-off shows (the chosen
    one and its durable alternative), or a note that it was skipped."""
    from dataclasses import replace

    from commitadvisor.signoff import Verification, verification_from
    from commitadvisor.simulate import simulate_case
    from commitadvisor.verify import compare, mean_noise

    if no_verify:
        return Verification("skipped", seed)
    sub_case = c.model_copy(update={"strategies": tuple(
        s for s, n in zip(c.strategies, c.strategy_names(), strict=True) if n in names)})
    sub_ev = replace(ev, strategies=tuple(s for s in ev.strategies if s.name in names))
    sys.stderr.write(f"checking {', '.join(names)} with the simulator (seed {seed}); this "
                     "takes a while\n")
    simulation = simulate_case(sub_case, seed=seed)
    return verification_from(compare(sub_ev, simulation.evaluation,
                                     noise=mean_noise(simulation)))


# --------------------------------------------------------------- the simulator
_DURATION_UNITS = {"s": 1.0, "m": 60.0, "h": 3600.0}


def _duration_s(option: str, text: str) -> float:
    """Seconds from '90', '90s', '5m', '2h' or '1.5h'; exit status 2 on anything else."""
    raw = text.strip().lower()
    unit = raw[-1:] if raw[-1:] in _DURATION_UNITS else "s"
    number = raw[:-1] if raw[-1:] in _DURATION_UNITS else raw
    try:
        value = float(number) * _DURATION_UNITS[unit]
    except ValueError:
        value = float("nan")
    if not (value > 0 and value < float("inf")):
        sys.stderr.write(f"{option}: '{text}' is not a duration; give a positive number with "
                         "s, m or h (for example 90s, 5m, 2h)\n")
        raise typer.Exit(EXIT_INPUT)
    return value


_SIMULATE_HELP = (
    "Simulate the case commit by commit (the discrete-event check of 'evaluate').\n\n"
    "Each regime is simulated as its own steady state (about --commits commits each), then "
    "blended over the cycle; the table has the same columns as 'evaluate' (ms, commits/s). "
    "A continuous timeline of --duration with the regimes switching at their times gives "
    "per-window figures (a summary here, every window with --series). The seed is printed; "
    "the same case and seed give the same output. Exit status 2 with one message on a bad "
    "case or option."
)


@app.command("simulate", help=_SIMULATE_HELP)
def simulate(
    case: CaseArg,
    duration: Annotated[str | None, typer.Option(
        "--duration", help="Length of the continuous timeline, in seconds or with a unit: "
                           "90s, 5m, 2h. Default: one cycle of the longest regime period "
                           "(at most 2h), or 60s when the case has no regimes.",
        show_default=False)] = None,
    seed: Annotated[int, typer.Option("--seed", min=0, help="Seed of every random draw "
                                      "(a non-negative integer).")] = 1,
    window: Annotated[str, typer.Option(
        "--window", help="Length of one window of the timeline, in seconds or with a unit "
                         "(10s, 1m).")] = "10s",
    series: Annotated[Path | None, typer.Option(
        "--series", help="Write every window of the timeline to this CSV file (window "
                         "start in s, latencies in ms, rates per second; replaced if it "
                         "exists).")] = None,
    commits: Annotated[int, typer.Option(
        "--commits", min=1000, help="Commits measured per regime's steady segment; more "
                                    "gives steadier p99.9 figures and takes longer.")
    ] = 1_000_000,
    fmt: Annotated[Fmt, typer.Option("--format", help="table: the tables; json: the "
                                     "simulation document (evaluation, segments, series).")
                   ] = Fmt.table,
    no_color: NoColor = False,
) -> None:
    """Simulate a case; see _SIMULATE_HELP."""
    window_s = _duration_s("--window", window)
    if duration is not None:
        duration_s = _duration_s("--duration", duration)
    else:
        duration_s = None
    if series is not None and not series.parent.is_dir():
        _fail_file(series, ValueError("its directory does not exist"))
    c = _load(case)
    if duration_s is None:
        longest = max((r.period_s for r in c.regimes), default=None)
        duration_s = min(longest, 7200.0) if longest else 60.0
    if window_s > duration_s:
        sys.stderr.write(f"--window ({window_s:g} s) is longer than --duration "
                         f"({duration_s:g} s)\n")
        raise typer.Exit(EXIT_INPUT)
    from commitadvisor.render.console import make_console
    from commitadvisor.render.simulate import series_csv, simulate_progress
    from commitadvisor.simulate import simulate_case

    try:
        with simulate_progress(make_console(no_color, stderr=True)) as progress:
            sim = simulate_case(c, seed=seed, duration_s=duration_s, commits=commits,
                                window_s=window_s, progress=progress)
    except ValueError as exc:
        sys.stderr.write(f"{case}: {exc}\n")
        raise typer.Exit(EXIT_INPUT) from None
    if series is not None:
        from commitadvisor.files import write_atomically

        try:
            write_atomically(series, series_csv(sim.series), force=True)
        except OSError as exc:
            _fail_file(series, ValueError(f"cannot be written: {exc.strerror or exc}"))
    if fmt is Fmt.json:
        from commitadvisor.render.simulate import simulation_json

        sys.stdout.write(simulation_json(sim))
        return
    from commitadvisor.render.simulate import render_simulation

    render_simulation(make_console(no_color), sim, c.goals.commit_p99_ms)
    if series is not None:
        typer.echo(f"wrote {series} ({len(sim.series)} windows)")


def main() -> None:
    """Console-script entry point."""
    app()
