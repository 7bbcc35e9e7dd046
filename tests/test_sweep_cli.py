"""``workbench sweep`` / ``show`` / ``history`` on the command line.

Includes the crash-safety check of the issue: a sweep started in a subprocess is
killed with SIGKILL after some trials are stored, resumed, and every trial is
then stored exactly once with the scores of an uninterrupted run.
"""

import json
import os
import re
import signal
import subprocess
import sys
from pathlib import Path

import pytest

from workbench.cli import main
from workbench.sweep.plan import SweepPlan
from workbench.sweep.runner import run_sweep
from workbench.sweep.store import Store

SAMPLES = Path(__file__).resolve().parents[1] / "sample_sets"
KILN = SAMPLES / "kiln_batches.csv"
SMALL = ["--hidden", "relu,gelu", "--layers", "8", "--folds", "3", "--repeats", "2",
         "--epochs", "4"]

CONFIG_KEYS = {"rank", "hidden", "head", "layers", "learning_rate", "alpha", "mean", "sd",
               "p_value", "tied_with_best", "engine", "status", "trials"}
TRIAL_KEYS = {"repeat", "fold", "test_score", "train_score", "fit_seconds", "epochs", "status"}


def _scores(store_path, sweep_id):
    with Store(store_path) as st:
        return {(t["config_index"], t["repeat"], t["fold"]): t["test_score"]
                for t in st.trials(sweep_id, with_history=False)
                + st.baseline_trials(sweep_id)}


def _predictions(store_path, sweep_id):
    """Every repeat's out-of-fold matrix (baselines included) as bytes."""
    with Store(store_path) as st:
        oof = st.out_of_fold(sweep_id, baselines=True)
    assert oof.complete.all()
    return [p.tobytes() for p in oof.predictions]


def _start(args, store):
    """``workbench sweep`` in its own session (so the test can signal its whole group)."""
    env = dict(os.environ, PYTHONUNBUFFERED="1")
    return subprocess.Popen([sys.executable, "-m", "workbench", "sweep", *args, "--store",
                             str(store)], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE,
                            text=True, env=env, start_new_session=True)


def _read_until(proc, n_done):
    """Read the progress lines until ``n_done`` trials are stored; return the sweep id."""
    sweep_id = None
    for line in proc.stderr:
        m = re.match(r"sweep (\S+): \d+ of \d+ trials", line)
        if m:
            sweep_id = m.group(1)
        m = re.search(r"\] (\d+)/(\d+)", line)
        if m and int(m.group(1)) >= n_done:
            return sweep_id
    raise AssertionError("the sweep ended before enough trials were stored")


def test_sweep_json_show_and_history(tmp_path, capsys):
    store = tmp_path / "s.sqlite"
    out = tmp_path / "r.json"
    rc = main(["sweep", str(KILN), "--target", "passes_inspection", "--hidden", "relu,gelu",
               "--layers", "8", "--layers", "8,4", "--folds", "2", "--repeats", "1",
               "--epochs", "3", "--metric", "accuracy", "--jobs", "2", "--store", str(store),
               "--json", str(out)])
    assert rc == 0
    printed = capsys.readouterr().out
    assert "tied with the best" in printed and "rank" in printed
    res = json.loads(out.read_text())
    assert res["metric"] == "accuracy" and res["state"] == "finished"
    cfgs = res["configurations"]
    assert len(cfgs) == 4 and [c["rank"] for c in cfgs] == [1, 2, 3, 4]
    assert all(CONFIG_KEYS <= set(c) for c in cfgs)
    assert all(TRIAL_KEYS <= set(t) and len(c["trials"]) == 2 for c in cfgs for t in c["trials"])
    means = [c["mean"] for c in cfgs]
    assert means == sorted(means, reverse=True)
    assert {tuple(c["layers"]) for c in cfgs} == {(8,), (8, 4)}
    assert cfgs[0]["tied_with_best"] and cfgs[0]["p_value"] is None

    assert main(["show", res["sweep_id"], "--store", str(store), "--json"]) == 0
    shown = json.loads(capsys.readouterr().out)
    assert shown == res

    assert main(["history", "--store", str(store), "--json"]) == 0
    hist = json.loads(capsys.readouterr().out)
    assert [(h["sweep_id"], h["state"], h["n_stored"]) for h in hist] == \
        [(res["sweep_id"], "finished", 8)]


def test_impossible_plans_and_bad_stores_exit_2(tmp_path, capsys):
    rc = main(["sweep", str(SAMPLES / "greenhouse_temp.csv"), "--target",
               "temp_change_next_hour", "--output", "relu,exp", "--store",
               str(tmp_path / "s.sqlite")])
    assert rc == 2
    err = capsys.readouterr().err
    assert "every requested output head is refused" in err and "negative values" in err
    junk = tmp_path / "junk.sqlite"
    junk.write_bytes(b"not a database" * 100)
    assert main(["history", "--store", str(junk)]) == 2
    assert "left untouched" in capsys.readouterr().err
    assert junk.read_bytes() == b"not a database" * 100
    assert main(["show", "nope", "--store", str(tmp_path / "s.sqlite")]) == 2
    assert main(["sweep", str(KILN), "--store", str(tmp_path / "s.sqlite")]) == 2
    assert "--target" in capsys.readouterr().err


def test_sigkill_then_resume_stores_every_trial_exactly_once(tmp_path):
    store = tmp_path / "s.sqlite"
    args = [str(KILN), "--target", "passes_inspection", *SMALL, "--jobs", "1"]
    n_trials = 2 * 3 * 2
    proc = _start(args, store)
    try:
        sweep_id = _read_until(proc, 3)
    finally:
        os.killpg(proc.pid, signal.SIGKILL)
        proc.wait()
    assert proc.returncode == -signal.SIGKILL
    with Store(store) as st:
        sw = st.get_sweep(sweep_id)
        assert sw["state"] == "interrupted"  # its process is gone
        assert 3 <= sw["n_stored"] < n_trials
        before = st.finished_keys(sweep_id)
    assert main(["sweep", "--resume", sweep_id, "--store", str(store), "--jobs", "1",
                 "--quiet"]) == 0
    with Store(store) as st:
        trials = st.trials(sweep_id, with_history=False)
        assert st.get_sweep(sweep_id)["state"] == "finished"
    keys = [(t["config_index"], t["repeat"], t["fold"]) for t in trials]
    assert len(keys) == len(set(keys)) == n_trials
    assert before <= set(keys)
    # an uninterrupted run of the same plan gives the same scores
    with Store(store) as st:
        plan = SweepPlan.from_dict(st.get_sweep(sweep_id)["plan"])
        fresh = run_sweep(plan, store=st, backend="inline")
    assert _scores(store, sweep_id) == _scores(store, fresh.sweep_id)
    assert _predictions(store, sweep_id) == _predictions(store, fresh.sweep_id)


#: a plan of 1000 trials (minutes of work on two cores): whatever the machine's load, it is
#: still running when the test signals it after its first stored trial
LONG = ["--hidden", "relu,tanh", "--layers", "8", "--folds", "5", "--repeats", "100",
        "--epochs", "60"]


def test_ctrl_c_exits_130_and_leaves_a_resumable_sweep(tmp_path):
    store = tmp_path / "s.sqlite"
    proc = _start([str(KILN), "--target", "passes_inspection", *LONG, "--jobs", "2"], store)
    try:
        sweep_id = _read_until(proc, 1)
        os.killpg(proc.pid, signal.SIGINT)  # what a terminal sends on Ctrl-C
        err = proc.stderr.read()
        proc.wait(timeout=60)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait()
    assert proc.returncode == 130
    assert f"workbench sweep --resume {sweep_id}" in err
    with Store(store) as st:
        sw = st.get_sweep(sweep_id)
    assert sw["state"] == "interrupted" and 1 <= sw["n_stored"] < sw["n_trials"] == 1000


@pytest.mark.parametrize("bad", [["--folds", "1"], ["--metric", "r2"], ["--engine", "sklearn",
                                                                         "--hidden", "gelu"]])
def test_bad_options_exit_2(tmp_path, bad, capsys):
    rc = main(["sweep", str(KILN), "--target", "passes_inspection", "--store",
               str(tmp_path / "s.sqlite"), *bad])
    assert rc == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("workbench: ") and "\n" not in err


# --------------------------------------------------------------------------- racing, ETA


def test_sweep_race_prints_the_stops_and_marks_them_in_the_table_and_json(tmp_path, capsys):
    """--race on scikit-learn's diabetes rows with a hopeless learning rate (1e-6): a line
    per stopped configuration on stderr (which, after which repeat and fold), the table's
    status column and the JSON say "stopped (racing)", the sweep's summary line counts the
    trials not run."""
    from sklearn.datasets import load_diabetes

    load_diabetes(as_frame=True).frame.iloc[:240].to_csv(tmp_path / "d.csv", index=False)
    out = tmp_path / "r.json"
    assert main(["sweep", str(tmp_path / "d.csv"), "--target", "target", "--hidden", "relu",
                 "--output", "identity", "--layers", "8", "--learning-rate", "0.03,0.000001",
                 "--folds", "3", "--repeats", "3", "--epochs", "15", "--jobs", "1", "--race",
                 "--store", str(tmp_path / "s.sqlite"), "--json", str(out)]) == 0
    cap = capsys.readouterr()
    (line,) = [x for x in cap.err.splitlines() if x.startswith("racing: stopped")]
    assert "lr=1e-06" in line and "after repeat" in line and "trials not run" in line
    assert re.search(r"racing stopped 1 configuration \((\d+) trials? not run\)", cap.err)
    res = json.loads(out.read_text())
    (stopped,) = [c for c in res["configurations"] if c["stopped"]]
    assert stopped["status"] == "stopped (racing)" and stopped["learning_rate"] == 1e-6
    assert res["plan"]["race"] is True
    assert "stopped (racing)" in cap.out  # the table's status column and the statement
    assert res["verdict"]["recommended"]["index"] != stopped["index"]


def test_resume_refuses_race_since_the_plan_says_it():
    from workbench.errors import EXIT_BAD_INPUT

    assert main(["sweep", "--resume", "x", "--race"]) == EXIT_BAD_INPUT


def _events(times, n_todo=100, workers=2):
    """A made-up event stream: sweep_started at 0, then a trial_finished at each time."""
    yield {"type": "sweep_started", "sweep_id": "S", "n_todo": n_todo, "n_trials": n_todo,
           "n_configurations": 5, "resumed": False, "backend": "processes",
           "workers": workers, "time": 1000.0}
    for i, t in enumerate(times, start=1):
        yield {"type": "trial_finished", "status": "done", "n_finished": i, "n_todo": n_todo,
               "best_mean": None, "best_label": None, "time": 1000.0 + t}


def test_eta_waits_for_enough_trials_then_uses_the_recent_rate():
    """Workers start slowly (the first two trials finish together after 11 s), then a trial
    finishes every 0.5 s. The old rule (elapsed / done x left) said 18 minutes after the
    first trial; now the ETA says estimating until 5 of 100 trials (5 %) have finished,
    then the rate of the recent finishes: 2 per second, so 95 left take 47.5 s."""
    import io

    from workbench.commands.sweep import Progress

    p = Progress(stream=io.StringIO())
    times = [11.0, 11.0] + [11.0 + 0.5 * k for k in range(1, 60)]
    etas = []
    for ev in _events(times):
        p(ev)
        if ev["type"] == "trial_finished":
            etas.append(p.eta())
    assert etas[:4] == [None] * 4
    assert etas[4] == pytest.approx(95 / ((5 - 1) / 1.5))  # from the 1st to the 5th finish
    assert etas[-1] == pytest.approx((100 - 61) / 2.0)  # the last 20 finishes: 2 per second
    # the bar says so in words
    q = Progress(stream=io.StringIO())
    for ev in list(_events([11.0], n_todo=4)):
        q(ev)
    assert "ETA estimating..." in q.stream.getvalue()


def test_eta_needs_two_distinct_finish_times_and_one_trial_per_worker():
    import io

    from workbench.commands.sweep import Progress

    p = Progress(stream=io.StringIO())
    for ev in _events([5.0] * 8, n_todo=20, workers=2):
        p(ev)
    assert p.eta() is None  # 8 trials, but all at one moment: no rate
    p(next(iter([{"type": "trial_finished", "status": "done", "n_finished": 9, "n_todo": 20,
                  "best_mean": None, "best_label": None, "time": 1007.0}])))
    assert p.eta() == pytest.approx(11 / (8 / 2.0))
    q = Progress(stream=io.StringIO())
    for ev in _events([1.0, 2.0, 3.0], n_todo=20, workers=4):
        q(ev)
    assert q.eta() is None  # fewer finished trials than workers


def test_a_stop_event_shrinks_the_trials_left_and_prints_a_line():
    import io

    from workbench.commands.sweep import Progress

    p = Progress(stream=io.StringIO())
    for ev in _events([1.0, 2.0], n_todo=30):
        p(ev)
    p({"type": "configuration_stopped", "config_index": 3, "label": "relu/identity [8] lr=1e-06",
       "after_repeat": 0, "after_fold": 4, "n_scores": 5, "best_index": 0,
       "best_label": "relu/identity [8] lr=0.03", "difference": -0.4, "p_worse": 0.995,
       "rope": 0.01, "reason": "...", "n_skipped": 10, "n_todo": 20, "time": 1003.0})
    assert p.n_todo == 20
    text = p.stream.getvalue()
    assert ("racing: stopped relu/identity [8] lr=1e-06 after repeat 1, fold 5 (5 fold "
            "scores): worse than relu/identity [8] lr=0.03 by 0.4 on average") in text
    assert "10 trials not run" in text


def test_the_sweep_command_module_imports_only_the_standard_library():
    """``workbench --help`` builds every sub-command's parser: the sweep command's module
    must not pull in NumPy, pandas, scikit-learn or the sweep package when imported."""
    code = ("import sys, workbench.commands.sweep; "
            "heavy = [m for m in ('numpy', 'pandas', 'sklearn', 'scipy', 'workbench.sweep', "
            "'workbench.data') if m in sys.modules]; print(heavy)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True).stdout.strip()
    assert out == "[]"


def test_the_kinds_written_out_in_the_command_are_the_profiles():
    from workbench.commands.sweep import KINDS
    from workbench.data.profiling import KINDS as PROFILE_KINDS

    assert KINDS == PROFILE_KINDS


def test_the_sweep_command_reads_its_table_once(tmp_path, monkeypatch):
    """The command reads the table once: the plan is built from that frame and the runner
    trains on the same frame (``run_sweep(frame=...)``) instead of reading and parsing
    the file a second time (1.3 s of a 32 MB CSV)."""
    from workbench.data import intake
    from workbench.sweep import runner

    reads, frames = [], []
    real_load, real_data = intake.load_table, runner.load_data

    def counted(*a, **k):
        reads.append(a[0] if a else k.get("path"))
        return real_load(*a, **k)

    def seen(plan, frame=None):
        frames.append(frame)
        return real_data(plan, frame)

    monkeypatch.setattr(intake, "load_table", counted)
    monkeypatch.setattr(runner, "load_data", seen)
    rc = main(["sweep", str(KILN), "--target", "passes_inspection", "--hidden", "relu",
               "--folds", "2", "--repeats", "1", "--epochs", "2", "--jobs", "1",
               "--store", str(tmp_path / "s.sqlite"), "--quiet"])
    assert rc == 0
    # the sweep's load is the command's frame; the results may read the table again
    # afterwards for the verdict's facts (the input width)
    assert frames and frames[0] is not None
    assert reads and str(reads[0]) == str(KILN) and len(reads) == len(frames)
