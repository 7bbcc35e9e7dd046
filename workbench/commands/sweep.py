"""``workbench sweep FILE --target COL [options]``: run an activation sweep.

Builds a :class:`workbench.sweep.plan.SweepPlan` from the options, runs it with
:func:`workbench.sweep.runner.run_sweep` (worker processes, or a Dask cluster with
``--cluster``), shows a progress bar on stderr (elapsed time, ETA, best score
so far), stores every trial as it finishes and prints the ranked table at the
end. ``--json OUT`` writes the full results (the object documented in
README.md, section "Sweep results as JSON"; ``-`` for stdout).

``--race`` stops configurations that the full sweep would rank below the best,
beyond doubt, after each block of folds (:mod:`workbench.sweep.racing`); the progress says which and
when, and the results mark their scores as partial.

``--resume SWEEP_ID`` finishes a stored sweep (FILE and the plan options are
taken from the store). Ctrl-C stops promptly, keeps every finished trial and
exits with status 130; the sweep can then be resumed. Exit status 2 for bad
input or an impossible plan.

This module imports only the standard library at load time (NumPy, pandas,
scikit-learn and the sweep package are imported in :func:`run`), so that
``workbench --help`` answers at once.
"""

from __future__ import annotations

import collections
import json
import math
import sys
import time

from workbench.errors import EXIT_CANCELLED, InputError

#: the target kinds ``--kind`` offers: :data:`workbench.data.profiling.KINDS`, written out
#: here so that building the parser imports no pandas (a test checks they are the same)
KINDS = ("binary", "multiclass", "signed", "non_negative", "count", "bounded")

#: the ETA waits until at least this share of the trials has finished (and at least one
#: per worker, at two distinct moments): the first trials carry the workers' start-up and
#: finish together, so a rate from them means little (a choice, not a cited figure)
ETA_MIN_SHARE = 0.05
#: the ETA's rate is taken over the last this many finishes (or two per worker, if more),
#: so that it follows a sweep whose trials get faster or slower (a choice)
ETA_WINDOW = 20

NAME = "sweep"
HELP = ("Sweep hidden activations x output heads x layers x learning rates x alphas under "
        "repeated cross-validation; store and rank the results.")


def add_arguments(parser):
    parser.add_argument("file", metavar="FILE", nargs="?", default=None,
                        help="a .csv, .tsv, .txt, .xlsx or .parquet table (not with --resume)")
    parser.add_argument("--target", metavar="COL", default=None, help="the target column (required, except with --resume)")
    parser.add_argument("--sheet", metavar="NAME", default=None,
                        help="sheet of an .xlsx workbook (default: the first)")
    parser.add_argument("--kind", choices=KINDS, default=None,
                        help="the target's kind, instead of the detected one (refused when the "
                             "values cannot have it); stored in the sweep")
    parser.add_argument("--role", metavar="COLUMN=ROLE", action="append", default=None,
                        help="make a column a feature or ignore it (ROLE feature or ignore); "
                             "repeat for several columns")
    parser.add_argument("--hidden", metavar="LIST", default="default",
                        help="hidden activations, comma-separated, or 'all' (default: relu, tanh, "
                             "leaky_relu, gelu, silu)")
    parser.add_argument("--output", metavar="auto|all|LIST", default="auto",
                        help="output heads: 'auto' (the advised head), 'all' (every head the "
                             "compatibility guard accepts) or names (default auto)")
    parser.add_argument("--layers", metavar="SHAPE", action="append", default=None,
                        help="hidden-layer shape, e.g. 64 or 64,32; repeat for several "
                             "(default 64)")
    parser.add_argument("--learning-rate", metavar="LR", action="append", default=None,
                        help="Adam's initial learning rate(s), comma-separated or repeated, "
                             "or 'tune': every activation and head tried at 0.001, 0.0055 "
                             "and 0.03, a log-scale grid (default 0.001)")
    parser.add_argument("--alpha", metavar="A", action="append", default=None,
                        help="L2 strength(s), comma-separated or repeated (default 0.0001)")
    parser.add_argument("--folds", type=int, metavar="K", default=5, help="K folds (default 5)")
    parser.add_argument("--repeats", type=int, metavar="R", default=2,
                        help="R repeats of the K folds, each with its own seed (default 2)")
    parser.add_argument("--epochs", type=int, metavar="N", default=200, help="maximum epochs (default 200)")
    parser.add_argument("--early-stopping", action="store_true",
                        help="hold out 10%% of each training fold and stop when it stalls")
    parser.add_argument("--metric", metavar="NAME", default=None,
                        help="scikit-learn scorer name (default per target kind: roc_auc binary, "
                             "balanced_accuracy multiclass, r2 continuous, "
                             "neg_mean_poisson_deviance counts with the exp head)")
    parser.add_argument("--engine", choices=("auto", "numpy", "sklearn"), default="auto",
                        help="auto and numpy: the NumPy engine for every configuration (fair "
                             "start for every head); sklearn: scikit-learn's MLP where it can "
                             "express the configuration (default auto)")
    parser.add_argument("--dtype", choices=("float32", "float64"), default="float32",
                        help="precision of the NumPy engine (default float32)")
    parser.add_argument("--jobs", type=int, metavar="N", default=None,
                        help="worker processes (default: every core)")
    parser.add_argument("--cluster", metavar="ADDR", default=None,
                        help="run on a Dask distributed scheduler, e.g. tcp://10.0.0.5:8786 "
                             "(default: local worker processes)")
    parser.add_argument("--store", metavar="PATH", default=None,
                        help="the store file (default: the user's data folder)")
    parser.add_argument("--seed", type=int, metavar="S", default=0, help="seed of folds and weights (default 0)")
    parser.add_argument("--holm", action="store_true",
                        help="judge ties with Holm's correction for the number of comparisons")
    from workbench.commands.show import add_rope_argument

    add_rope_argument(parser)
    parser.add_argument("--json", metavar="OUT", default=None,
                        help="write the full results as JSON to OUT ('-' for stdout)")
    parser.add_argument("--resume", metavar="SWEEP_ID", default=None,
                        help="finish a stored sweep: run exactly its missing trials")
    parser.add_argument("--table", metavar="PATH", default=None,
                        help="with --resume: where the sweep's table is now, when it was moved "
                             "(its SHA-256 is checked; default: the stored path)")
    parser.add_argument("--race", action="store_true",
                        help="racing: after each block of folds from the 2nd on, stop "
                             "configurations the full sweep would rank below the current best "
                             "(P >= 0.975, Student t prediction from the paired fold scores so "
                             "far, variances moderated across configurations); the leaders of "
                             "the verdict's comparisons are kept; stopped ones keep their "
                             "scores, marked partial")
    parser.add_argument("--quiet", action="store_true", help="no progress bar")


def _clock(seconds: float) -> str:
    seconds = int(round(max(0.0, seconds)))
    h, rest = divmod(seconds, 3600)
    m, s = divmod(rest, 60)
    return f"{h}:{m:02d}:{s:02d}" if h else f"{m}:{s:02d}"


def _where(backend: str, workers: int) -> str:
    """Where the trials run, in words: ``on 2 worker processes``."""
    n = int(workers)
    if backend == "inline":
        return "in this process"
    if backend == "processes":
        return f"on {n} worker process{'es' if n != 1 else ''}"
    return f"on {n} {backend} worker{'s' if n != 1 else ''}"


class Progress:
    """Draws the event stream as a progress bar on stderr.

    On a terminal the bar is redrawn in place; otherwise a line is written at
    every tenth of the sweep, so logs stay short. Times are the events' own
    (``time``), so a recorded or made-up event stream draws the same bar.

    The ETA (:meth:`eta`) says ``estimating...`` until the finished trials mean
    something: at least one per worker and :data:`ETA_MIN_SHARE` of the trials,
    finished at two distinct moments at least. It is then the trials left over
    the rate of the recent finishes (the last :data:`ETA_WINDOW`), which leaves
    out the workers' start-up that the first trial carries.

    With racing, each configuration stopped is written on a line of its own
    (which, after how many fold scores, and how many trials it saves), and the
    trials left to run shrink accordingly.
    """

    def __init__(self, stream=None, quiet=False, width=24):
        self.stream = stream if stream is not None else sys.stderr
        self.quiet = quiet
        self.width = width
        self.tty = bool(getattr(self.stream, "isatty", lambda: False)())
        self.sweep_id = None
        self.t0 = time.time()
        self.now = self.t0
        self.n_todo = 0
        self.n_done = 0
        self.workers = 1
        self.best = None
        self.problems = 0
        self.stopped = []
        self.finishes = collections.deque(maxlen=ETA_WINDOW)  # (time, n_done)
        self._last_tenth = -1

    def __call__(self, ev: dict) -> None:
        kind = ev["type"]
        self.now = float(ev.get("time", time.time()))
        if kind == "sweep_started":
            self.sweep_id = ev["sweep_id"]
            self.n_todo = ev["n_todo"]
            self.workers = max(1, int(ev.get("workers") or 1))
            self.finishes = collections.deque(maxlen=max(ETA_WINDOW, 2 * self.workers))
            self.t0 = self.now
            if not self.quiet:
                what = "resuming" if ev["resumed"] else "sweep"
                self._line(f"{what} {ev['sweep_id']}: {ev['n_todo']} of {ev['n_trials']} trials "
                           f"to run ({ev['n_configurations']} configurations) "
                           f"{_where(ev['backend'], ev['workers'])}", newline=True)
        elif kind == "trial_finished" and ev["status"] != "cancelled":
            self.n_done = ev["n_finished"]
            self.n_todo = ev.get("n_todo", self.n_todo)
            self.finishes.append((self.now, self.n_done))
            if ev["status"] != "done":
                self.problems += 1
            if ev["best_mean"] is not None:
                self.best = (ev["best_mean"], ev["best_label"])
            self._draw()
        elif kind == "configuration_stopped":
            self.n_todo = ev["n_todo"]
            self.stopped.append(ev)
            if not self.quiet:
                if self.tty:
                    self.stream.write("\r\x1b[K")
                self._line(stopped_line(ev), newline=True)
        elif kind == "sweep_finished" and not self.quiet:
            if self.tty:
                self.stream.write("\n")
            raced = ""
            if self.stopped:
                saved = sum(e["n_skipped"] for e in self.stopped)
                n = len(self.stopped)
                raced = (f"; racing stopped {n} configuration{'s' if n != 1 else ''} "
                         f"({saved} trial{'s' if saved != 1 else ''} not run)")
            self._line(f"sweep {ev['sweep_id']} {ev['state']} after {_clock(ev['seconds'])}: "
                       f"{ev['n_finished']}/{ev['n_todo']} trials run{raced}", newline=True)

    def eta(self) -> float | None:
        """Seconds left, or None while there is too little to go on (class docstring)."""
        left = self.n_todo - self.n_done
        if left <= 0:
            return 0.0
        if self.n_done < max(self.workers, math.ceil(ETA_MIN_SHARE * self.n_todo)):
            return None
        (t_first, n_first), (t_last, n_last) = self.finishes[0], self.finishes[-1]
        if t_last <= t_first or n_last <= n_first:
            return None  # every recent trial finished at one moment: no rate yet
        rate = (n_last - n_first) / (t_last - t_first)
        return left / rate

    def _draw(self):
        if self.quiet:
            return
        frac = self.n_done / self.n_todo if self.n_todo else 1.0
        elapsed = self.now - self.t0
        eta = self.eta()
        filled = int(round(min(1.0, frac) * self.width))
        bar = "#" * filled + "-" * (self.width - filled)
        best = f"  best {self.best[0]:.4f} {self.best[1]}" if self.best else ""
        issues = f"  ({self.problems} not done)" if self.problems else ""
        text = (f"[{bar}] {self.n_done}/{self.n_todo}  elapsed {_clock(elapsed)}  "
                f"ETA {'estimating...' if eta is None else _clock(eta)}{best}{issues}")
        if self.tty:
            self.stream.write("\r" + text + "\x1b[K")
            self.stream.flush()
        else:
            tenth = int(frac * 10)
            if tenth != self._last_tenth:
                self._last_tenth = tenth
                self._line(text, newline=True)

    def _line(self, text, newline=False):
        self.stream.write(text + ("\n" if newline else ""))
        self.stream.flush()


def stopped_line(ev: dict) -> str:
    """A ``configuration_stopped`` event in one line: which, when, why, what it saves."""
    n = ev["n_skipped"]
    return (f"racing: stopped {ev['label']} after repeat {ev['after_repeat'] + 1}, fold "
            f"{ev['after_fold'] + 1} ({ev['n_scores']} fold scores): worse than "
            f"{ev['best_label']} by {-ev['difference']:.4g} on average, P(worse beyond "
            f"±{ev['rope']:.4g}) = {ev['p_worse']:.3f}; {n} trial{'s' if n != 1 else ''} "
            "not run")


def _write_json(res: dict, out: str) -> None:
    text = json.dumps(res, indent=2, allow_nan=False)
    if out == "-":
        sys.stdout.write(text + "\n")
        return
    try:
        with open(out, "w", encoding="utf-8") as fh:
            fh.write(text + "\n")
    except OSError as exc:
        raise InputError(f"cannot write the JSON results to {out} ({exc.strerror}); choose "
                         "another path") from None


def _capped_jobs(jobs):
    """``--jobs``, capped at the cores (with a note on stderr: more workers than cores
    only compete for them)."""
    from workbench.sweep.pool import default_jobs

    if jobs is None or jobs < 1:
        return jobs  # the default, or refused by the sweep with its own message
    cores = default_jobs()
    if jobs > cores:
        print(f"workbench: note: --jobs {jobs} is more than the {cores} cores of this computer; "
              f"using {cores}", file=sys.stderr)
        return cores
    return jobs


class _sigterm_as_interrupt:
    """While the sweep runs, SIGTERM stops it like Ctrl-C: finished trials stay stored,
    the workers and the table copy go, and the sweep can be resumed."""

    def __enter__(self):
        import signal
        import threading

        self._old = None
        if threading.current_thread() is threading.main_thread():
            def stop(signum, frame):
                raise KeyboardInterrupt

            self._old = signal.signal(signal.SIGTERM, stop)
        return self

    def __exit__(self, *exc):
        import signal

        if self._old is not None:
            signal.signal(signal.SIGTERM, self._old)


def _timed(on_event):
    """``on_event`` that also marks the sweep's start, its first trial handed out and its
    first trial stored on the start-up timeline (:func:`workbench.sweep.pool.mark`)."""
    import os

    from workbench.sweep.pool import TIMELINE_ENV, mark

    if not os.environ.get(TIMELINE_ENV):
        return on_event
    seen = set()

    def timed(ev):
        kind = ev["type"]
        if kind in ("sweep_started", "trial_started", "trial_finished") and kind not in seen:
            seen.add(kind)
            mark({"sweep_started": "sweep stored, trials about to be handed out",
                  "trial_started": "first trial handed to a worker",
                  "trial_finished": "first trial stored"}[kind])
        on_event(ev)

    return timed


def _missing_table_or_target(args) -> None:
    if args.file is None:
        raise InputError("name the table: workbench sweep FILE --target COL "
                         "(or --resume SWEEP_ID)")
    raise InputError("name the target column with --target COL (see workbench inspect "
                     f"{args.file} for a suggestion)")


def run(args) -> int:
    if args.resume is None and (args.file is None or args.target is None):
        _missing_table_or_target(args)  # one line, before anything is started
    from workbench.sweep.pool import mark, open_gate

    mark("sweep command started")
    if args.cluster is None and (args.jobs is None or args.jobs >= 1):
        # the workers start (and import what trials need) while this process reads the
        # table; staggered: one worker imports now, the others once this process has done
        # its own imports (three importers on two cores would make each of them later)
        from workbench.sweep.pool import default_jobs, prestart

        prestart(min(int(args.jobs or default_jobs()), default_jobs()), staggered=True)
        mark("workers started")
    try:
        return _run(args, mark, open_gate)
    except BaseException:
        # a refusal (bad option, table, store...) or a crash: the prestarted workers are
        # stopped now; left alone, this process would wait at its exit for their imports
        # (and a held-back worker for its gate)
        from workbench.sweep.pool import stop_pool

        stop_pool()
        raise


def _run(args, mark, open_gate) -> int:
    """:func:`run` once the workers are started."""
    # only what the sweep needs before its first trial; the ranking's modules
    # (workbench.sweep.results, workbench.commands.show) come after the sweep
    from workbench.data.profiling import parse_roles
    from workbench.sweep.bayes import check_rope
    from workbench.sweep.plan import build_plan, read_table
    from workbench.sweep.runner import run_sweep
    from workbench.sweep.store import Store

    mark("parent imports done")
    rope = None if args.rope is None else check_rope(args.rope)  # refused before any trial
    frame = None
    if args.resume is None:
        # read once: the plan is built from this frame and the sweep trains on it
        frame = read_table(args.file, args.sheet) if args.file is not None else None
        plan = build_plan(args.file, args.target, df=frame, hidden=args.hidden,
                          output=args.output,
                          layers=args.layers, learning_rates=args.learning_rate,
                          alphas=args.alpha, folds=args.folds, repeats=args.repeats,
                          epochs=args.epochs, early_stopping=args.early_stopping,
                          metric=args.metric, engine=args.engine, seed=args.seed,
                          dtype=args.dtype, sheet=args.sheet, kind=args.kind,
                          roles=parse_roles(args.role), race=args.race)
        for head, why in plan.refused_heads.items():
            print(f"workbench: head {head} left out: {why}", file=sys.stderr)
        for head, why in plan.head_warnings.items():
            print(f"workbench: note on head {head}: {why}", file=sys.stderr)
        mark("plan built (table read)")
    else:
        if args.file is not None or args.target is not None or args.kind or args.role:
            raise InputError("--resume takes the table and plan from the store; drop FILE, "
                             "--target, --kind and --role (a moved table: --table PATH)")
        if args.race:
            raise InputError("--resume races exactly when the stored sweep did (racing is part "
                             "of its plan); drop --race")
        plan = None
    if args.table is not None and args.resume is None:
        raise InputError("--table is for --resume; a new sweep takes its table as FILE")
    jobs = _capped_jobs(args.jobs)
    progress = Progress(quiet=args.quiet)
    store = Store(args.store)
    open_gate()  # this process's imports are done: the held-back workers may import now
    try:
        try:
            with _sigterm_as_interrupt():
                outcome = run_sweep(plan, store=store, resume=args.resume, jobs=jobs,
                                    cluster=args.cluster, on_event=_timed(progress),
                                    table=args.table, frame=frame)
        except InputError as exc:
            if args.resume is not None and exc.setting == "table":
                # here the table is set with --table, not with the FILE argument
                raise InputError(f"{exc} (set with --table)") from None
            raise
        except KeyboardInterrupt:
            sid = progress.sweep_id
            if sid:
                n = store.get_sweep(sid)["n_stored"]
                print(f"\nworkbench: sweep {sid} cancelled; {n} finished trials are stored; "
                      f"finish it with: workbench sweep --resume {sid}", file=sys.stderr)
            else:
                print("\nworkbench: cancelled", file=sys.stderr)
            return EXIT_CANCELLED
        from workbench.sweep.results import sweep_results

        res = sweep_results(store, outcome.sweep_id, holm=args.holm, rope=rope)
    finally:
        store.close()
    if args.json:
        _write_json(res, args.json)
    if args.json != "-":
        from workbench.commands.show import format_results

        print(format_results(res))
    if outcome.state != "finished":
        print(f"workbench: sweep {outcome.sweep_id} interrupted; finish it with: "
              f"workbench sweep --resume {outcome.sweep_id}", file=sys.stderr)
        return EXIT_CANCELLED
    return 0
