"""Command line interface. Each command parses options, calls one library
function and formats its result; errors become ``Error: …`` plus a hint."""

from __future__ import annotations

import functools
import json
import re
import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any, TypeVar, cast

import typer

from .errors import GeonormError
from .progress import ProgressEvent
from .resolve.resolver import DEFAULT_ACCEPT

if TYPE_CHECKING:
    from rich.console import Console
    from rich.table import Table

app = typer.Typer(
    help="Resolve free-text location fields to ISO 3166 places, offline.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)
gazetteer_app = typer.Typer(help="Build or inspect the compiled place index.", no_args_is_help=True)
app.add_typer(gazetteer_app, name="gazetteer")


class _LazyConsole:
    """A rich ``Console`` made at its first use: a command that prints nothing (``clean
    --quiet``) never imports rich."""

    def __init__(self, **options: Any) -> None:
        self._options = options
        self._console: Any = None

    def __getattr__(self, name: str) -> Any:
        if self._console is None:
            from rich.console import Console

            self._console = Console(**self._options)
        return getattr(self._console, name)


err = cast("Console", _LazyConsole(stderr=True, highlight=False))
out = cast("Console", _LazyConsole(highlight=False))


def _table(*args: Any, **options: Any) -> Table:
    """A rich ``Table`` (rich imported when a command prints one)."""
    from rich.table import Table

    return Table(*args, **options)


AcceptOpt = Annotated[
    float,
    typer.Option(
        "--accept", min=0.0, max=1.0, help="Confidence needed for status 'matched' (0-1)."
    ),
]
CacheOpt = Annotated[
    Path | None,
    typer.Option(
        "--cache",
        envvar="GEONORM_CACHE",
        help="SQLite cache file (default: in the user data folder).",
    ),
]
QuietOpt = Annotated[
    bool,
    typer.Option("--quiet", "-q", help="No progress messages or summary; errors still show."),
]


class _Renderer:
    """Renders the library's progress events: dim notes and a rich progress bar on a
    terminal; only the first-use notice otherwise; nothing with ``--quiet``. Errors never
    pass through here: ``handle_errors`` prints them whatever ``--quiet`` says, and lets
    unexpected exceptions through with their traceback."""

    def __init__(self, quiet: bool) -> None:
        self.quiet = quiet
        self.tty = sys.stderr.isatty()
        self.bar: Any = None
        self.task: Any = None
        self.started = 0.0

    def __call__(self, event: ProgressEvent) -> None:
        if self.quiet:
            return
        if event.kind == "note":
            if self.tty:
                err.print(f"[dim]{shown(event.text)}[/dim]")
            elif "first use" in event.text:
                err.print(visible(event.text), markup=False)
        elif self.tty and event.kind == "start":
            self._start(event)
        elif self.bar is not None and event.kind == "advance":
            self.bar.advance(self.task, event.done)
            done = self.bar.tasks[self.task].completed
            rate = done / max(time.perf_counter() - self.started, 1e-6)
            self.bar.update(self.task, rate=f"{rate:,.0f}/s")

    def _start(self, event: ProgressEvent) -> None:
        from rich.progress import (
            BarColumn,
            MofNCompleteColumn,
            Progress,
            TextColumn,
            TimeElapsedColumn,
            TimeRemainingColumn,
        )

        self.close()
        self.bar = Progress(
            TextColumn("{task.description}"),
            BarColumn(),
            MofNCompleteColumn(),
            TextColumn("{task.fields[rate]}"),
            TimeElapsedColumn(),
            TimeRemainingColumn(),
            console=err,
            transient=True,
        )
        self.bar.start()
        self.task = self.bar.add_task(shown(event.text), total=event.total, rate="")
        self.started = time.perf_counter()

    def close(self) -> None:
        if self.bar is not None:
            self.bar.stop()
            self.bar = None

    def text(self, message: str) -> None:
        """For the index build, which reports plain messages."""
        self(ProgressEvent("note", message))


_FIELD = re.compile(r"`([a-z_]+)`")


def as_flags(text: str) -> str:
    """Library messages name fields in backquotes (`bad_lines`); the CLI shows flags."""
    return _FIELD.sub(lambda m: "--" + m.group(1).replace("_", "-"), text)


# Characters that must not reach a terminal as they are: C0 and C1 controls (ESC starts
# escape sequences), DEL, the line and paragraph separators, and the bidirectional
# formatting characters of Unicode TR9, which can reorder or hide text.
_UNSAFE = re.compile("[\x00-\x1f\x7f-\x9f\u061c\u200e\u200f\u2028\u2029\u202a-\u202e\u2066-\u2069]")
_SHORT_ESCAPES = {"\t": "\\t", "\n": "\\n", "\r": "\\r"}
# The same, less the C0 controls, which JSON escapes itself (a newline there is layout).
_UNSAFE_IN_JSON = re.compile("[\x7f-\x9f\u061c\u200e\u200f\u2028\u2029\u202a-\u202e\u2066-\u2069]")


def _escape_char(m: re.Match[str]) -> str:
    ch = m.group(0)
    code = ord(ch)
    return _SHORT_ESCAPES.get(ch) or (f"\\x{code:02x}" if code < 0x100 else f"\\u{code:04x}")


def visible(text: object) -> str:
    """User text made harmless for a terminal: control characters as visible escapes."""
    return _UNSAFE.sub(_escape_char, str(text))


def shown(text: object) -> str:
    """User text for rich output: visible escapes, and rich markup escaped (``[/x]`` stays)."""
    from rich.markup import escape

    return escape(visible(text))


def _print_json(payload: Any) -> None:
    """JSON on stdout; characters unsafe for a terminal are written as JSON escapes."""
    from rich.highlighter import JSONHighlighter
    from rich.text import Text

    text = _UNSAFE_IN_JSON.sub(
        lambda m: f"\\u{ord(m.group(0)):04x}", json.dumps(payload, ensure_ascii=False, indent=2)
    )
    rendered = JSONHighlighter()(Text(text))
    rendered.no_wrap, rendered.overflow = True, None
    out.print(rendered, soft_wrap=True)


F = TypeVar("F", bound=Callable[..., Any])


def handle_errors(fn: F) -> F:
    """Turn the library's errors into a message, a hint and exit code 1."""

    @functools.wraps(fn)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        try:
            return fn(*args, **kwargs)
        except GeonormError as exc:
            typer.echo(f"Error: {visible(as_flags(exc.message))}", err=True)
            if exc.hint:
                typer.echo(f"Hint: {visible(as_flags(exc.hint))}", err=True)
            raise typer.Exit(1) from None

    return wrapper  # type: ignore[return-value]


@app.command()
@handle_errors
def lookup(
    text: Annotated[list[str], typer.Argument(help="One or more location strings.")],
    as_json: Annotated[bool, typer.Option("--json", help="Print JSON instead of a table.")] = False,
    accept: AcceptOpt = DEFAULT_ACCEPT,
    cache: Annotated[
        Path | None,
        typer.Option(
            "--cache",
            envvar="GEONORM_CACHE",
            help="Use this cache: its stored answers and the review decisions in it.",
        ),
    ] = None,
    quiet: QuietOpt = False,
) -> None:
    """Resolve location strings given on the command line."""
    from .batch.answers import resolve_keys
    from .resolve.resolver import Resolver

    show = _Renderer(quiet)
    resolver = Resolver(accept=accept, progress=show.text)
    keys = [resolver.key(t) for t in text]
    the_cache = None
    if cache is not None:  # the cache module is imported only when a cache is used
        from .batch.cache import Cache

        the_cache = Cache(cache)
    try:
        answers = resolve_keys(
            dict.fromkeys(keys, 1), resolver=resolver, cache=the_cache, accept=accept, full=True
        )
    finally:
        if the_cache is not None:
            the_cache.close()
    results = [(t, answers.results[k]) for t, k in zip(text, keys, strict=True)]
    if as_json:
        from .batch.lookup import answer_json

        _print_json([answer_json(t, r) for t, r in results])
        return
    table = _table(show_lines=False)
    for col in ("text", "status", "place", "confidence", "reason", "candidates"):
        table.add_column(col, overflow="fold")
    for t, r in results:
        place = " / ".join(x for x in (r.city, r.subdivision, r.country) if x)
        cands = "; ".join(f"{c.label()} ({c.score:.2f})" for c in r.candidates[:3])
        table.add_row(
            shown(t),
            r.status.value,
            shown(place),
            f"{r.confidence:.2f}" if r.country else "",
            shown(r.reason_text),
            shown(cands),
        )
    out.print(table)
    if answers.decided:
        out.print(
            f"reason 'reviewed': a person's decision stored in {visible(cache)} was used "
            "(see geonorm review list)",
            markup=False,
        )


def _report_html(*args: Any, **kwargs: Any) -> str:
    """The run report page, imported only when one is asked for (it needs scipy)."""
    from .figures.report import report_html

    return report_html(*args, **kwargs)


@app.command()
@handle_errors
def clean(
    input: Annotated[
        str, typer.Argument(help="File to clean: CSV, TSV, Parquet or JSON Lines ('-' for stdin).")
    ],
    column: Annotated[str, typer.Option("--column", "-c", help="Name of the location column.")],
    output: Annotated[
        str, typer.Option("--out", "-o", help="Where to write the result ('-' for stdout).")
    ],
    cache: CacheOpt = None,
    accept: AcceptOpt = DEFAULT_ACCEPT,
    prefix: Annotated[str, typer.Option("--prefix", help="Prefix of the added columns.")] = "geo_",
    format: Annotated[
        str | None,
        typer.Option(
            "--format",
            help="Output format: csv, tsv, parquet or jsonl (default: from --out's extension).",
        ),
    ] = None,
    separator: Annotated[
        str | None,
        typer.Option(
            "--separator", help="Field separator of a CSV input (default: sniffed from the header)."
        ),
    ] = None,
    encoding: Annotated[
        str, typer.Option("--encoding", help="Text encoding of the input.")
    ] = "utf-8",
    workers: Annotated[
        int | None,
        typer.Option(
            "--workers",
            help="Processes resolving new strings (default: number of cores); with --engine "
            "dask and no --scheduler, the local cluster's worker processes.",
        ),
    ] = None,
    bad_lines: Annotated[
        Path | None,
        typer.Option(
            "--bad-lines", help="Write rows with the wrong number of fields here and go on."
        ),
    ] = None,
    report: Annotated[
        Path | None,
        typer.Option(
            "--report",
            help="Write a run report here: a page to look at (.html) or the summary as JSON "
            "(.json).",
        ),
    ] = None,
    remote: Annotated[
        str | None,
        typer.Option(
            "--remote",
            help="Send the doubtful rest to a remote geocoder: a TOML adapter file (opt-in).",
        ),
    ] = None,
    budget: Annotated[
        int | None, typer.Option("--budget", min=0, help="Most requests in this run.")
    ] = None,
    budget_total: Annotated[
        int | None,
        typer.Option(
            "--budget-total", min=0, help="Most requests across runs (counted in the cache)."
        ),
    ] = None,
    refresh: Annotated[
        bool, typer.Option("--refresh", help="Ask the remote service again.")
    ] = False,
    dry_run: Annotated[
        bool,
        typer.Option(
            "--dry-run", help="With --remote: show what would be sent; send and write nothing."
        ),
    ] = False,
    engine: Annotated[
        str,
        typer.Option(
            "--engine",
            help="local: this machine; dask: a Dask cluster (INPUT may be a folder or a glob, "
            "--out a folder of Parquet files).",
        ),
    ] = "local",
    scheduler: Annotated[
        str | None,
        typer.Option(
            "--scheduler",
            help="With --engine dask: the scheduler's address, tcp://HOST:PORT (default: a "
            "local cluster of --workers processes).",
        ),
    ] = None,
    quiet: QuietOpt = False,
) -> None:
    """Append geo columns to every row of a table, in input order."""
    from .batch.cache import Cache
    from .batch.clean import clean_file
    from .batch.options import CleanOptions

    options = CleanOptions.build(
        accept=accept,
        prefix=prefix,
        encoding=encoding,
        separator=separator,
        format=format,
        workers=workers,
        bad_lines=bad_lines,
        report=report,
        remote=remote,
        budget=budget,
        budget_total=budget_total,
        refresh=refresh,
        dry_run=dry_run,
    )
    if engine not in ("local", "dask"):
        raise GeonormError(f"unknown engine {engine!r}", hint="use --engine local or --engine dask")
    if scheduler is not None and engine != "dask":
        raise GeonormError("--scheduler only applies with --engine dask", hint="add --engine dask")
    show = _Renderer(quiet)
    with Cache(cache) as the_cache:
        try:
            if engine == "dask":
                from .batch.dask_engine import clean_dataset

                summary = clean_dataset(
                    input,
                    column,
                    output,
                    options,
                    cache=the_cache,
                    scheduler=scheduler,
                    progress=show,
                )
            else:
                summary = clean_file(
                    input,
                    column,
                    output,
                    options,
                    cache=the_cache,
                    progress=show,
                    report_page=_report_html,
                )
        finally:
            show.close()
    if dry_run:
        r = summary.remote
        typer.echo(
            f"would send {r['planned']:,} request(s) to {visible(r['provider'])} "
            f"({r['eligible']:,} doubtful strings, "
            f"{r['already_answered']:,} answered before, {r['over_budget']:,} over the "
            "budget); first:",
            err=True,
        )
        for item in r["top_planned"]:
            typer.echo(f"  {item['rows']:>7,}  {visible(item['text'])}", err=True)
        return
    if not quiet:
        _print_summary(summary)


def _print_summary(summary) -> None:
    shares = summary.to_dict()["status_share"]
    parts = ", ".join(f"{k} {v:,} ({shares[k]:.1%})" for k, v in summary.status.items())
    typer.echo(
        f"{summary.rows:,} rows, {summary.distinct:,} distinct strings "
        f"({summary.cache_hits:,} from the cache) in {summary.seconds:.2f} s: {parts}",
        err=True,
    )
    if summary.bad_lines:
        typer.echo(
            f"{summary.bad_lines:,} row(s) with the wrong number of fields were set aside", err=True
        )
    r = summary.remote
    if r:
        typer.echo(
            f"remote {visible(r['provider'])}: {r['requests']:,} request(s) for "
            f"{r['answered']:,} new answer(s) "
            f"({r['with_results']:,} with results, {r['no_result']:,} without, {r['errors']:,} "
            "errors, "
            f"{r['retries']:,} retries); {r['already_answered']:,} answered before; "
            f"{r['strings_changed']:,} string(s) changed",
            err=True,
        )
        for message in r["messages"]:
            typer.echo(f"remote {visible(message)}", err=True)
    if summary.output and summary.output != "-":
        typer.echo(f"wrote {visible(summary.output)}", err=True)


@app.command()
@handle_errors
def demo(
    out_dir: Annotated[Path, typer.Option("--out", help="Folder for the demo outputs.")] = Path(
        "geonorm-demo"
    ),
    quiet: QuietOpt = False,
) -> None:
    """Clean the bundled demo member list and print a summary."""
    from .demo import run_demo

    show = _Renderer(quiet)
    try:
        result = run_demo(out_dir, progress=show)
    finally:
        show.close()
    _print_summary(result["summary"])
    table = _table(title="Top countries (matched rows)")
    table.add_column("country")
    table.add_column("rows", justify="right")
    for cc, n in result["top_countries"]:
        table.add_row(shown(cc), f"{n:,}")
    out.print(table)
    for label, path in result["files"].items():
        out.print(visible(f"{label}: {path}"), markup=False, soft_wrap=True)
    out.print(f"Open the run report in a browser: {result['report']}", markup=False, soft_wrap=True)


review_app = typer.Typer(
    help="The review loop: export doubtful strings, apply people's decisions.", no_args_is_help=True
)
app.add_typer(review_app, name="review")


@review_app.command("export")
@handle_errors
def review_export(
    cleaned: Annotated[Path, typer.Argument(help="A file written by geonorm clean.")],
    out: Annotated[Path, typer.Option("--out", "-o", help="Where to write the queue (CSV).")],
    column: Annotated[
        str | None,
        typer.Option(
            "--column", "-c", help="The location column (default: the one geonorm clean used)."
        ),
    ] = None,
    below: Annotated[
        float | None,
        typer.Option(
            "--below",
            min=0.0,
            max=1.0,
            help="Also queue matched strings with confidence below this.",
        ),
    ] = None,
    top: Annotated[
        int | None, typer.Option("--top", min=1, help="Keep only the N most impactful lines.")
    ] = None,
    prefix: Annotated[str, typer.Option("--prefix", help="Prefix of the geo columns.")] = "geo_",
    cache: CacheOpt = None,
) -> None:
    """Write one line per doubtful distinct text, ranked by rows affected × doubt."""
    from .batch.cache import Cache
    from .review.queue import export_queue

    n = export_queue(
        cleaned, out, column=column, below=below, top=top, prefix=prefix, cache=Cache(cache)
    )
    typer.echo(
        f"wrote {n:,} line(s) to {visible(out)}; fill in decision_country (ISO code or "
        "not_a_place), optionally decision_subdivision, decision_city and decision_note, then "
        f"run: geonorm review apply {visible(out)}",
        err=True,
    )


@review_app.command("apply")
@handle_errors
def review_apply(
    queue: Annotated[Path, typer.Argument(help="The queue CSV with decisions filled in.")],
    dry_run: Annotated[
        bool, typer.Option("--dry-run", help="Check the decisions, store nothing.")
    ] = False,
    cache: CacheOpt = None,
) -> None:
    """Validate the decisions and store the valid ones as overrides."""
    from .batch.cache import Cache
    from .review.queue import apply_decisions

    rep = apply_decisions(queue, cache=Cache(cache), dry_run=dry_run)
    for problem in rep.problems:
        typer.echo(visible(f"{queue}: {problem}"), err=True)
    verb = "would store" if dry_run else "stored"
    typer.echo(
        f"{verb} {rep.stored} decision(s) ({rep.new} new, {rep.changed} changed); {rep.unchanged} "
        f"unchanged, {rep.skipped} line(s) without a decision, {len(rep.problems)} with problems",
        err=True,
    )
    if rep.problems:
        typer.echo(
            "Hint: fix the lines above and apply the file again; applying twice changes nothing",
            err=True,
        )
        raise typer.Exit(1)


@review_app.command("list")
@handle_errors
def review_list(
    cache: CacheOpt = None,
    as_json: Annotated[bool, typer.Option("--json", help="Print JSON.")] = False,
) -> None:
    """List the stored decisions."""
    from .batch.cache import Cache

    decisions = list(Cache(cache).overrides().values())
    if as_json:
        _print_json(decisions)
        return
    table = _table()
    for col in ("text", "decision", "note", "decided_at"):
        table.add_column(col, overflow="fold")
    for d in decisions:
        what = (
            "not a place"
            if d["not_a_place"]
            else " / ".join(x for x in (d["city"], d["subdivision"], d["country"]) if x)
        )
        table.add_row(shown(d["text"]), shown(what), shown(d["note"] or ""), shown(d["decided_at"]))
    out.print(table)


@review_app.command("undo")
@handle_errors
def review_undo(
    text: Annotated[
        str, typer.Argument(help="The text whose decision to remove (any case or spacing).")
    ],
    cache: CacheOpt = None,
) -> None:
    """Remove a stored decision; later runs resolve the text again."""
    from .batch.cache import Cache
    from .review.queue import undo

    undo(text, cache=Cache(cache))
    typer.echo(visible(f"removed the decision for {text!r}"), err=True)


@app.command()
@handle_errors
def score(
    labelled: Annotated[
        Path, typer.Argument(help="A file with location text and the true country.")
    ],
    column: Annotated[str, typer.Option("--column", "-c", help="The location text column.")],
    truth: Annotated[
        str, typer.Option("--truth", help="Column with the true ISO 3166-1 alpha-2 code.")
    ],
    truth_subdivision: Annotated[
        str | None,
        typer.Option("--truth-subdivision", help="Column with the true ISO 3166-2 code."),
    ] = None,
    target_precision: Annotated[
        float,
        typer.Option(
            "--target-precision",
            min=0.0,
            max=1.0,
            help="Find the threshold that reaches this precision.",
        ),
    ] = 0.97,
    accept: AcceptOpt = DEFAULT_ACCEPT,
    as_json: Annotated[bool, typer.Option("--json", help="Print JSON.")] = False,
) -> None:
    """Measure accuracy and calibration on a labelled sample."""
    from .review.scoring import score_file

    rep = score_file(
        labelled,
        column,
        truth,
        truth_subdivision=truth_subdivision,
        accept=accept,
        target_precision=target_precision,
    )
    if as_json:
        out.print_json(json.dumps(rep.to_dict()))
        return
    out.print(
        f"{rep.rows} rows, {rep.positives} with a true country; at --accept {rep.accept:g}: "
        f"{rep.matched} matched, precision {rep.precision:.3f}, recall {rep.recall:.3f}, F1 "
        f"{rep.f1:.3f}",
        markup=False,
    )
    if rep.subdivision_accuracy is not None:
        out.print(
            f"subdivision right {rep.subdivision_accuracy:.3f} of {rep.subdivision_n} matched rows "
            "with a true subdivision",
            markup=False,
        )
    t = _table(title="Precision and coverage by threshold")
    for col in ("threshold", "called", "precision", "coverage"):
        t.add_column(col, justify="right")
    for row in rep.by_threshold:
        t.add_row(
            f"{row['threshold']:.2f}",
            str(row["called"]),
            f"{row['precision']:.3f}",
            f"{row['coverage']:.3f}",
        )
    out.print(t)
    t = _table(title=f"Reliability (expected calibration error {rep.ece:.3f})")
    for col in ("confidence", "answers", "mean confidence", "share right"):
        t.add_column(col, justify="right")
    for row in rep.reliability:
        if row["n"]:
            t.add_row(
                row["bin"], str(row["n"]), f"{row['mean_confidence']:.3f}", f"{row['accuracy']:.3f}"
            )
    out.print(t)
    if rep.confusions:
        t = _table(title="Most frequent confusions (matched rows)")
        for col in ("truth", "given", "rows"):
            t.add_column(col)
        for c in rep.confusions:
            t.add_row(shown(c["truth"]), shown(c["given"]), str(c["rows"]))
        out.print(t)
    if rep.threshold_for_target is not None:
        out.print(
            f"--accept {rep.threshold_for_target:.2f} reaches precision "
            f"{rep.target_precision:g} on this "
            f"sample (coverage {rep.coverage_at_target:.3f})",
            markup=False,
        )
    else:
        out.print(
            f"no threshold reaches precision {rep.target_precision:g} on this sample", markup=False
        )


@app.command()
@handle_errors
def tally(
    cleaned: Annotated[Path, typer.Argument(help="A file written by geonorm clean.")],
    out: Annotated[
        Path,
        typer.Option("--out", "-o", help="Where to write the per-country CSV (+ .json sidecar)."),
    ],
    by: Annotated[
        str | None, typer.Option("--by", help="Also count per group of this column.")
    ] = None,
    split: Annotated[
        str | None, typer.Option("--split", help="Separator of several groups in one cell.")
    ] = None,
    population: Annotated[
        Path | None,
        typer.Option(
            "--population",
            help="Population table: CSV by ISO code or name, or a World Bank download.",
        ),
    ] = None,
    year: Annotated[
        int | None, typer.Option("--year", help="Year of the population table to use.")
    ] = None,
    include_review: Annotated[
        bool,
        typer.Option("--include-review", help="Count review rows with a single country guess too."),
    ] = False,
    min_count: Annotated[
        int, typer.Option("--min-count", min=1, help="Leave out countries with fewer rows.")
    ] = 1,
    prefix: Annotated[str, typer.Option("--prefix", help="Prefix of the geo columns.")] = "geo_",
) -> None:
    """Per-country counts, rates per million with intervals, shrunk rates, location quotients."""
    from .figures.tally import tally_file, write_tally

    if split is not None and by is None:
        raise GeonormError(
            "--split only applies with --by", hint="add --by COLUMN, or drop --split"
        )
    result = tally_file(
        cleaned,
        by=by,
        split=split,
        population=population,
        year=year,
        include_review=include_review,
        min_count=min_count,
        prefix=prefix,
    )
    sidecar = write_tally(result, out, by=by is not None)
    f = result.funnel
    typer.echo(
        f"{f['rows']:,} rows, {f['rows_with_text']:,} with text, {f['matched']:,} matched, "
        f"{f['review']:,} review, {f['unmatched']:,} unmatched, {f['not_a_place']:,} not a place; "
        f"{f['located']:,} located (disclosure {result.sidecar['disclosure_share']:.1%})",
        err=True,
    )
    missing = result.sidecar["countries_without_population"]
    if missing:
        typer.echo(f"no population for: {', '.join(missing)} (rates left empty)", err=True)
    typer.echo(f"wrote {out} and {sidecar}", err=True)


@app.command("map")
@handle_errors
def map_command(
    table: Annotated[Path, typer.Argument(help="A CSV written by geonorm tally.")],
    value: Annotated[str, typer.Option("--value", help="Column to map, e.g. shrunk_per_million.")],
    out: Annotated[Path, typer.Option("--out", "-o", help="map.svg, map.html or map.png.")],
    title: Annotated[str | None, typer.Option("--title", help="Title above the map.")] = None,
    unit: Annotated[str | None, typer.Option("--unit", help="Unit shown in the legend.")] = None,
    group: Annotated[
        str | None, typer.Option("--group", help="With a --by tally: the group to map.")
    ] = None,
) -> None:
    """Draw an offline world choropleth of one column of a tally."""
    from .figures.mapping import write_map

    write_map(table, value, out, title=title, unit=unit, group=group)
    typer.echo(f"wrote {out}", err=True)


@gazetteer_app.command("build")
@handle_errors
def gazetteer_build(
    path: Annotated[Path | None, typer.Option("--path", help="Where to write the index.")] = None,
) -> None:
    """(Re)build the place index from the installed packages."""
    from .resolve.index import build_index

    built = build_index(path, progress=lambda m: err.print(m, markup=False))
    out.print(str(built), markup=False)


@gazetteer_app.command("info")
@handle_errors
def gazetteer_info(
    path: Annotated[Path | None, typer.Option("--path", help="Index file to describe.")] = None,
    as_json: Annotated[bool, typer.Option("--json", help="Print JSON.")] = False,
) -> None:
    """Describe the compiled place index: version, sources, counts."""
    from .resolve.index import PlaceIndex, default_index_path

    p = path or default_index_path()
    idx = PlaceIndex(p)
    meta = {"path": str(p), "size_mb": round(p.stat().st_size / 1e6, 1), **idx.meta}
    if as_json:
        _print_json(meta)
        return
    table = _table(show_header=False)
    for k, v in meta.items():
        table.add_row(shown(k), shown(v))
    out.print(table)


serve_app = typer.Typer(
    help="Run the batch service (HTTP: resolve, file jobs, decisions, a review page), "
    "or manage its tokens.",
    invoke_without_command=True,
)
app.add_typer(serve_app, name="serve")
token_app = typer.Typer(help="Make, list and revoke the service's tokens.", no_args_is_help=True)
serve_app.add_typer(token_app, name="token")
DataDirOpt = Annotated[
    Path,
    typer.Option(
        "--data-dir", help="The service's folder: cache, jobs table, job files, token hashes."
    ),
]


@serve_app.callback()
@handle_errors
def serve(
    ctx: typer.Context,
    data_dir: Annotated[
        Path | None,
        typer.Option(
            "--data-dir", help="The service's folder: cache, jobs table, job files, token hashes."
        ),
    ] = None,
    host: Annotated[
        str,
        typer.Option("--host", help="Address to listen on (another than loopback needs a token)."),
    ] = "127.0.0.1",
    port: Annotated[
        int, typer.Option("--port", min=1, max=65535, help="Port to listen on.")
    ] = 8750,
    job_workers: Annotated[
        int, typer.Option("--job-workers", min=1, help="Processes running file jobs.")
    ] = 1,
    keep_days: Annotated[
        int, typer.Option("--keep-days", min=1, help="Delete jobs and their files after this.")
    ] = 30,
    rate: Annotated[
        float, typer.Option("--rate", min=0.0, help="Requests a second per token (0: no limit).")
    ] = 50.0,
    max_upload_mb: Annotated[
        int, typer.Option("--max-upload-mb", min=1, help="Largest file a job takes.")
    ] = 2048,
) -> None:
    """Run the batch service on this machine (stop it with Ctrl-C or SIGTERM)."""
    if ctx.invoked_subcommand is not None:
        return
    if data_dir is None:
        raise GeonormError(
            "geonorm serve needs --data-dir", hint="pass a folder, e.g. --data-dir geonorm-service"
        )
    from .service.server import serve as run_service

    run_service(
        data_dir,
        host=host,
        port=port,
        job_workers=job_workers,
        keep_days=keep_days,
        rate=rate,
        max_upload_mb=max_upload_mb,
    )


@token_app.command("add")
@handle_errors
def token_add(
    name: Annotated[str, typer.Argument(help="Who or what uses the token.")],
    role: Annotated[str, typer.Option("--role", help="resolve, review or admin.")],
    data_dir: DataDirOpt,
) -> None:
    """Make a token; prints it once (only a salted hash is kept)."""
    from .service.server import add_token

    typer.echo(add_token(data_dir, name, role))


@token_app.command("list")
@handle_errors
def token_list(data_dir: DataDirOpt) -> None:
    """List the tokens' names and roles (never the tokens)."""
    from .service.server import list_tokens

    table = _table()
    for col in ("name", "role", "created"):
        table.add_column(col)
    for t in list_tokens(data_dir):
        table.add_row(shown(t.name), t.role, t.created)
    out.print(table)


@token_app.command("revoke")
@handle_errors
def token_revoke(
    name: Annotated[str, typer.Argument(help="The token's name.")], data_dir: DataDirOpt
) -> None:
    """Remove a token; the service refuses it from the next request on."""
    from .service.server import revoke_token

    revoke_token(data_dir, name)
    typer.echo(visible(f"revoked the token {name!r}"), err=True)


if __name__ == "__main__":  # pragma: no cover
    app()
