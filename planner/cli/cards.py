"""``kplan cards``: a class set — one recipe card per student, the instructor's key and the class stock
list."""

from __future__ import annotations

import string
from pathlib import Path
from typing import Annotated

import typer

from ..inputs.choices import CARD_SERIES
from ..inputs.choices import PAPERS as PAPER_CHOICES
from ..inputs.limits import MAX_CARDS, MAX_TUBES
from ..inputs.text import plural
from .app import UserError, app, dump_json, err, out
from .app import safe_text as S
from .options import PaperSize, PlanFile, count_option, flag_option, path_option, seed_option, text_option

OUTPUTS = ("cards.pdf", "key.pdf", "key.csv", "key.xlsx", "stocks.pdf", "stocks.csv")


def _sections(roster, k: int | None):
    """The roster with ``k`` sections in contiguous blocks (A, B, …) when asked for."""
    if k is None:
        return roster
    from dataclasses import replace

    if k < 1 or k > len(roster):
        raise UserError(f"--sections {k}: give between 1 and the number of students ({len(roster)})")
    if any(roster.sections):
        raise UserError("--sections: the roster already has a section column; leave --sections out")
    names = list(string.ascii_uppercase) if k <= 26 else [str(i + 1) for i in range(k)]
    size = -(-len(roster) // k)
    return replace(roster, sections=tuple(names[i // size] for i in range(len(roster))))


RosterFile = Annotated[
    Path | None, path_option("class roster CSV: id, name (optional section, bench)", "--roster")
]
Count = Annotated[
    int | None,
    count_option(f"number of students, without a roster (ids S01, S02, …; at most {MAX_CARDS})", MAX_CARDS),
]
OutDir = Annotated[Path, path_option("folder for the cards, the key and the stock list", "--out")]
CardSeed = Annotated[int, seed_option("seed: the same seed and roster give the same files")]
Tubes = Annotated[int | None, count_option("tubes per student's card (overrides design.tubes)", MAX_TUBES)]
Sections = Annotated[
    int | None,
    typer.Option(help="split the class into K sections (A, B, …) in roster order", min=1, metavar="INTEGER"),
]
Series = Annotated[
    str | None,
    text_option(
        f"the series on every card: {' | '.join(CARD_SERIES)} (default: the plan's "
        "design.card_series, else binding-curve)"
    ),
]
Pooled = Annotated[
    bool,
    flag_option(
        "make the cards for the class's pooled fit alone (most efficient for K, but each card "
        "holds two or three clusters of near-identical tubes, not a series to plot)",
        "--pooled",
    ),
]
CardsJson = Annotated[bool, flag_option("print the class summary as JSON", "--json")]


@app.command()
def cards(
    plan: PlanFile,
    roster_path: RosterFile = None,
    count: Count = None,
    out_dir: OutDir = Path("kplan-cards"),
    seed: CardSeed = 0,
    tubes: Tubes = None,
    sections: Sections = None,
    series: Series = None,
    pooled: Pooled = False,
    paper: PaperSize = "A4",
    as_json: CardsJson = False,
) -> None:
    """One recipe card per student — every card a series the student can plot and fit (a binding curve, a
    mole-ratio or a Job series), all different, each individually sound, together efficient for the class's
    pooled fit — with the instructor's key (expected readings and acceptance bands) and the class stock
    list. Exit 0 when every card passes, 1 when the class set cannot be made sound."""
    from ..inputs.files import check_output_folder, write_atomic_many
    from ..inputs.plan import load_plan
    from ..inputs.roster import read_roster_csv, roster_of_count

    _validate_options(roster_path, count, paper, series, pooled)
    check_output_folder(out_dir, OUTPUTS, (plan, roster_path))  # before the work, not after it
    p = load_plan(plan)
    roster = read_roster_csv(roster_path) if roster_path is not None else roster_of_count(count)
    roster = _sections(roster, sections)

    show = err.is_terminal and not as_json
    with _Bar(show, len(roster)) as bar:
        cs, stocks, files = make_class_files(
            p, roster, tubes=tubes, seed=seed, paper=paper, series=series, pooled=pooled, bar=bar
        )
    # the cards, the key and the stock list belong together: all of them or none
    write_atomic_many({out_dir / name: files[name] for name in OUTPUTS})
    if as_json:
        from ..paper.json_out import cards_json

        print(dump_json(cards_json(cs, stocks, [out_dir / n for n in OUTPUTS])))
    else:
        _print(cs, stocks, out_dir)
    if not cs.sound:
        raise typer.Exit(1)


def _validate_options(roster_path, count, paper: str, series, pooled: bool) -> None:
    """Refuse options that contradict each other or a choice outside its list."""
    if (roster_path is None) == (count is None):
        raise UserError("give either --roster FILE or --count N (one of them)")
    if paper not in PAPER_CHOICES:
        raise UserError(f"--paper {paper}: choose one of {', '.join(PAPER_CHOICES)}")
    if series is not None and series not in CARD_SERIES:
        raise UserError(f"--series {series}: choose one of {', '.join(CARD_SERIES)}")
    if series is not None and pooled:
        raise UserError("--series and --pooled: cards for the pooled fit hold no series; give one of them")


def make_class_files(
    p, roster, *, tubes: int | None, seed: int, paper: str, series=None, pooled: bool = False, bar=None
):
    """The class set, its stock list and every output file's bytes (what ``kplan cards`` writes; the
    benchmark times this)."""
    from ..jobs.classroom.cards import class_set
    from ..jobs.classroom.stock_list import class_stocks
    from ..paper import cards as paper_cards

    bar = bar or _Bar(False, 0)
    _warm_up()  # here, not in the printing process: it inherits what this one loaded, and the key needs it
    with _CardsPrinter(p, paper, roster) as printer:
        bar.start()
        cs = class_set(
            p,
            roster,
            tubes=tubes,
            seed=seed,
            series=series,
            pooled=pooled,
            progress=bar.assessed,
            drafted=printer.drafted,
        )
        stocks = class_stocks(p, [c.recipe for c in cs.cards], roster)
        files: dict[str, bytes] = {}
        bar.stage("key.pdf")
        files["key.pdf"] = paper_cards.key_document(p, cs, stocks, paper=paper)
        files["key.csv"] = paper_cards.key_csv(p, cs).encode("utf-8")
        files["key.xlsx"] = paper_cards.key_xlsx(p, cs)
        files["stocks.csv"] = paper_cards.stocks_csv(p, stocks).encode("utf-8")
        bar.stage("cards.pdf and stocks.pdf")
        files["cards.pdf"], files["stocks.pdf"] = printer.result(cs, stocks)
    return cs, stocks, files


def _print(cs, stocks, out_dir: Path) -> None:

    from ..paper import fmt

    se = cs.se
    n = len(cs.cards)
    out.print(
        f"[bold]{S(cs.title)}[/bold]: {plural(n, 'card')} of {plural(cs.best.n_tubes, 'tube')}, "
        f"seed {cs.seed}"
    )
    out.print(
        f"  SE of log β[{cs.target}] from one card's own readings: {fmt.sig(se['cards_median'], 2)} "
        f"(median; worst {fmt.sig(se['cards_max'], 2)}, goal {fmt.sig(cs.goal_se, 2)})"
    )
    out.print(
        f"  class pooled {fmt.sig(se['pooled'], 2)}; {plural(n, 'copy', 'copies')} of the best recipe "
        f"{fmt.sig(se['pooled_best_copies'], 2)}; {plural(n, 'copy', 'copies')} of the even series "
        f"{fmt.sig(se['pooled_even_copies'], 2)}; stock errors left out "
        f"{fmt.sig(se['pooled_without_stock'], 2)}"
    )
    out.print(
        f"  efficiency against {plural(n, 'copy', 'copies')} of the best recipe "
        f"{fmt.percent(cs.efficiency, 3)} ({fmt.percent(cs.efficiency_without_stock, 3)} with the stock "
        f"errors left out)"
    )
    if cs.lab != "pooled":
        low = min(c.spread.distinct for c in cs.cards)
        out.print(f"  every card a {cs.lab} series of at least {low} distinct compositions")
    for s in stocks:
        if s.enough is False:
            out.print(
                f"  [yellow]stock {s.id}: the class needs {s.total_mL:.1f} mL, {s.on_hand_mL:g} mL on hand: "
                f"make {s.shortfall_mL:.1f} mL more[/yellow]"
            )
    for note in cs.notes:
        out.print(f"  note: {S(note)}")
    if cs.sound:
        out.print("  [green]every card passes the assessment; no two cards share a set of tubes[/green]")
    else:
        if not cs.distinct:
            err.print("[red]not sound:[/red] two cards share the same set of tubes")
        for sid, problems in cs.failing():
            err.print(f"[red]card {S(sid)} fails:[/red] {S('; '.join(problems))}", soft_wrap=True)
        err.print(
            "[red]the class set is not sound[/red]: use more tubes per student (--tubes), a looser "
            "design.goal_se, or fewer students per recipe grid"
        )
    out.print(f"wrote {', '.join(OUTPUTS)} in {S(str(out_dir))}")


def _warm_up() -> None:
    """Load WeasyPrint and the fonts (~0.8 s of CPU the first time) before the printing process is forked:
    loaded once for both processes, not once in each."""
    from ..paper.render import html_to_pdf

    html_to_pdf("<p>kplan</p>")


def _print_cards(plan, drafts, paper: str, roster, stocks=None) -> tuple[bytes, bytes]:
    """cards.pdf and stocks.pdf: both need only the cards' recipes (and the roster's benches)."""
    from ..jobs.classroom.stock_list import class_stocks
    from ..paper.cards import cards_document, stocks_document

    if stocks is None:
        stocks = class_stocks(plan, [d.recipe for d in drafts], roster)
    return cards_document(plan, drafts, paper=paper), stocks_document(plan, drafts, stocks, paper=paper)


class _CardsPrinter:
    """Prints the students' cards and the class stock list in a second process while this one assesses
    the cards and prints the key (they need only the recipes). Where the assessment replaced a drafted
    card, or the system cannot fork, they are printed here instead; the bytes are the same either way."""

    MIN_CARDS = 8  # below this the second process is not worth starting

    def __init__(self, plan, paper: str, roster):
        import multiprocessing

        self.plan, self.paper, self.roster = plan, paper, roster
        self.drafts = None
        self.pool = None
        self.job = None
        if len(roster) >= self.MIN_CARDS and "fork" in multiprocessing.get_all_start_methods():
            self.pool = multiprocessing.get_context("fork").Pool(1)

    def drafted(self, drafts) -> None:
        self.drafts = drafts
        if self.pool is not None:
            self.job = self.pool.apply_async(_print_cards, (self.plan, drafts, self.paper, self.roster))

    def result(self, cs, stocks) -> tuple[bytes, bytes]:
        """(cards.pdf, stocks.pdf) of the class set ``cs`` and its stock list ``stocks``."""
        import numpy as np

        same = (
            self.drafts is not None
            and len(self.drafts) == len(cs.cards)
            and all(
                d.recipe.tubes == c.recipe.tubes and np.array_equal(d.recipe.volumes_mL, c.recipe.volumes_mL)
                for d, c in zip(self.drafts, cs.cards, strict=True)
            )
        )
        if self.job is not None and same:
            data = self.job.get()
            self._close()
            return data
        self._close()
        return _print_cards(self.plan, cs.cards, self.paper, self.roster, stocks)

    def _close(self) -> None:
        if self.pool is not None:
            self.pool.terminate()
            self.pool.join()
            self.pool = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self._close()
        return False


class _Bar:
    """A rich progress line on stderr, shown once a class set has taken more than ``DELAY_S`` (choosing
    the cards, one line per card assessed, then each file printed)."""

    DELAY_S = 1.0  # a class set that takes longer than this shows its progress (issue 21: ~1 s)

    def __init__(self, show: bool, total: int):
        self.show = show and total > 0
        self.total = total
        self.bar = None
        self.task = None
        self.timer = None
        self.what = "choosing the cards"
        self.done = 0
        self.closed = False
        import threading

        self.lock = threading.Lock()

    def __enter__(self):
        return self

    def start(self) -> None:
        """Arm the delay (after any printing process is forked, so the child has no timer thread)."""
        if self.show and self.timer is None:
            import threading

            self.timer = threading.Timer(self.DELAY_S, self._appear)
            self.timer.daemon = True
            self.timer.start()

    def _appear(self) -> None:
        from rich.progress import BarColumn, Progress, SpinnerColumn, TextColumn, TimeElapsedColumn

        with self.lock:
            if self.closed:
                return
            # the time so far, not a time left: printing the files has no steps to count
            columns = (SpinnerColumn(), TextColumn("{task.description}"), BarColumn(), TimeElapsedColumn())
            bar = Progress(*columns, console=err, transient=True)
            self.task = bar.add_task(self.what, total=self.total + 2, completed=self.done)
            bar.start()
            self.bar = bar

    def _update(self) -> None:
        if self.bar is not None:
            self.bar.update(self.task, description=self.what, completed=self.done)

    def assessed(self, done: int, total: int) -> None:
        self.done, self.what = done, f"card {done} of {total} assessed"
        self._update()

    def stage(self, name: str) -> None:
        # one step a file, never the last: the line keeps turning until the files are written
        self.done, self.what = min(self.done + 1, self.total + 1), f"printing {name}"
        self._update()

    def __exit__(self, *exc):
        with self.lock:
            self.closed = True
            if self.timer is not None:
                self.timer.cancel()
            if self.bar is not None:
                self.bar.stop()
        return False
