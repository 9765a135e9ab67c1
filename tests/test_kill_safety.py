"""Kills and faults while results are written: the old complete result or the new one.

A run of ``splitlift fit --out L --report R --plot DIR`` writes one result
(lift, report, plots). Whatever moment the run dies at, a reader must find
either the previous complete result or the new complete one, never a mix,
and no temporary of ours may stay behind once the next run has started.
"""

import multiprocessing
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import splitlift as sl
from splitlift import persistence
from splitlift.persistence import TEMPORARY_PREFIX, AtomicResult, remove_stale_temporaries

pytest.importorskip("matplotlib")

SOURCE = str(Path(sl.__file__).resolve().parents[1])


def ended_process_id() -> int:
    """The id of a process that has just ended (a stale owner of temporaries)."""
    child = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"],
                           capture_output=True, text=True, check=True)
    return int(child.stdout)


def temporaries(folder: Path) -> list[Path]:
    return [path for path in folder.rglob("*") if path.name.startswith(TEMPORARY_PREFIX)]


def stale_name(pid: int) -> str:
    return f"{TEMPORARY_PREFIX}{pid}-0123abcd-{persistence._host_tag()}"


# ------------------------------------------------------------ temporaries of killed runs
def in_child(function, *arguments) -> int:
    """Run ``function`` in a forked child process; return its exit code."""
    child = multiprocessing.get_context("fork").Process(target=function, args=arguments)
    child.start()
    child.join()
    return child.exitcode


def _die_while_writing(path):
    def write(handle):
        handle.write(b"half")
        os._exit(9)  # dies like SIGKILL: no cleanup runs

    persistence.atomic_write(path, write)


def test_temporaries_are_named_recognisably_and_removed_after_a_kill(tmp_path):
    for _ in range(3):  # each attempt removes what the previous one left: no accumulation
        assert in_child(_die_while_writing, tmp_path / "out.bin") == 9
        assert len(temporaries(tmp_path)) == 1 and not (tmp_path / "out.bin").exists()
    persistence.atomic_write(tmp_path / "out.bin", lambda handle: handle.write(b"whole"))
    assert (tmp_path / "out.bin").read_bytes() == b"whole"
    assert temporaries(tmp_path) == []


def test_only_temporaries_of_ended_processes_are_removed(tmp_path):
    dead = tmp_path / stale_name(ended_process_id())
    mine = tmp_path / stale_name(os.getpid())
    parent = tmp_path / stale_name(os.getppid())
    elsewhere = tmp_path / f"{TEMPORARY_PREFIX}1-0123abcd-another.host"
    users = tmp_path / ".lift.npz.tmp"  # not ours
    for path in (dead, mine, parent, elsewhere, users):
        path.write_bytes(b"")
    (tmp_path / (stale_name(ended_process_id()))).mkdir()  # a staging folder
    removed = remove_stale_temporaries(tmp_path)
    assert len(removed) == 2 and dead in removed
    assert all(path.exists() for path in (mine, parent, elsewhere, users))


# ------------------------------------------------------------ one result, all or nothing
def write_result(folder: Path, tag: str, fail_after: int | None = None):
    """Stage lift.txt, report.txt and plots/{a,b}.png holding ``tag``; maybe fail midway."""
    with AtomicResult() as result:
        staged = [result.file(folder / "lift.txt"), result.file(folder / "report.txt")]
        plots = result.folder(folder / "plots", owned_names=("a.png", "b.png", "c.png"))
        staged += [plots / "a.png", plots / "b.png"]
        for number, path in enumerate(staged):
            if fail_after is not None and number == fail_after:
                raise OSError(28, "No space left on device")
            path.write_text(tag)


def result_state(folder: Path) -> str:
    """'old', 'new', 'none' or 'mixed' for the four files of :func:`write_result`."""
    files = [folder / "lift.txt", folder / "report.txt", folder / "plots" / "a.png",
             folder / "plots" / "b.png"]
    contents = {path.read_text() if path.exists() else "none" for path in files}
    return contents.pop() if len(contents) == 1 else "mixed"


def test_result_is_published_whole(tmp_path):
    write_result(tmp_path, "new")
    assert result_state(tmp_path) == "new" and temporaries(tmp_path) == []


@pytest.mark.parametrize("fail_after", [0, 1, 2, 3])
def test_failure_while_staging_keeps_the_old_result(tmp_path, fail_after):
    write_result(tmp_path, "old")
    (tmp_path / "plots" / "c.png").write_text("old")  # an older plot of ours
    (tmp_path / "plots" / "notes.txt").write_text("user's")  # not ours
    with pytest.raises(OSError, match="No space"):
        write_result(tmp_path, "new", fail_after=fail_after)
    assert result_state(tmp_path) == "old" and temporaries(tmp_path) == []
    assert (tmp_path / "plots" / "c.png").exists()
    write_result(tmp_path, "new")
    assert result_state(tmp_path) == "new"
    assert not (tmp_path / "plots" / "c.png").exists()  # no plot of the older result stays
    assert (tmp_path / "plots" / "notes.txt").read_text() == "user's"


def test_failure_on_a_fresh_folder_leaves_nothing(tmp_path):
    with pytest.raises(OSError):
        write_result(tmp_path, "new", fail_after=3)
    assert list(tmp_path.iterdir()) == []


def _die_after_moves(folder, allowed):
    """Write a new result but die (like SIGKILL) after ``allowed`` of its final moves."""
    remaining = [allowed]

    def counted(move):
        def wrapper(source, target):
            if TEMPORARY_PREFIX not in str(target):  # a move into place, not a staging step
                if remaining[0] == 0:
                    os._exit(9)
                remaining[0] -= 1
            move(source, target)
        return wrapper

    os.replace, os.rename = counted(os.replace), counted(os.rename)  # in the child only
    write_result(folder, "new")
    os._exit(0)


@pytest.mark.parametrize("plots_exist", [True, False])
def test_death_between_the_final_moves_is_rolled_back(tmp_path, plots_exist):
    """Die after k of the final renames, for every k: recovery restores the old result."""
    outcomes = []
    for allowed in range(6):
        folder = tmp_path / f"run{allowed}"
        folder.mkdir()
        write_result(folder, "old")
        if not plots_exist:
            for name in ("a.png", "b.png"):
                (folder / "plots" / name).unlink()
            (folder / "plots").rmdir()
        code = in_child(_die_after_moves, folder, allowed)
        before = result_state(folder)
        journal = any(path.name == "journal.json" for path in folder.rglob("*"))
        # a mix is only ever visible while the journal records the unfinished moves
        assert before in ("old", "new", "none") or journal
        for place in (folder, folder / "plots"):
            remove_stale_temporaries(place)
        after = result_state(folder)
        outcomes.append((code, before, after))
        assert after in (("old", "new") if plots_exist else ("mixed", "new"))
        if not plots_exist and after == "mixed":  # the old result had no plots at all
            assert not (folder / "plots").exists()
            assert (folder / "lift.txt").read_text() == "old"
        assert temporaries(folder) == []
    assert outcomes[0][0] == 9 and outcomes[-1][0] == 0, outcomes
    assert outcomes[-1][2] == "new"


# ------------------------------------------------------------ the command line, killed
def synthetic_table(n_samples: int, seed: int) -> pd.DataFrame:
    """Invented ridge-function data (synthetic; no real process behind it)."""
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n_samples, 6))
    y = np.sin(X[:, 0] + X[:, 1]) + 0.5 * X[:, 2] + 0.1 * rng.standard_normal(n_samples)
    table = pd.DataFrame(X, columns=[f"sensor_{k}" for k in range(6)])
    table["response"] = y
    return table


def fit_arguments(data: Path, folder: Path, dim: int) -> list[str]:
    return ["fit", str(data), "--target", "response", "--dim", str(dim), "--seed", "1",
            "--out", str(folder / "lift.npz"), "--report", str(folder / "report.txt"),
            "--plot", str(folder / "plots")]


def cli_signature(folder: Path) -> tuple:
    """Contents of one run's result (None for a missing file)."""
    names = [folder / "lift.npz", folder / "report.txt", folder / "plots" / "eigenvalues.png",
             folder / "plots" / "sufficient_summary.png"]
    return tuple(path.read_bytes() if path.is_file() else None for path in names)


def _run_cli(arguments):
    from splitlift.cli import main

    sys.stdout = open(os.devnull, "w")  # noqa: SIM115 - the child ends with os._exit
    os._exit(main(arguments))


def run_forked(arguments, kill_after: float | None = None) -> tuple[int | None, float]:
    """Run the command line in a forked child (no import cost), maybe SIGKILL it."""
    context = multiprocessing.get_context("fork")
    child = context.Process(target=_run_cli, args=(arguments,))
    start = time.perf_counter()
    child.start()
    if kill_after is not None:
        child.join(kill_after)
        if child.exitcode is None:
            os.kill(child.pid, signal.SIGKILL)
    child.join()
    return child.exitcode, time.perf_counter() - start


def test_killed_fit_leaves_the_old_or_the_new_complete_result(tmp_path):
    data = tmp_path / "synthetic.csv"
    synthetic_table(1500, seed=5).to_csv(data, index=False)
    references = {}
    for tag, dim in (("old", 1), ("new", 2)):
        folder = tmp_path / f"reference_{tag}"
        folder.mkdir()
        code, duration = run_forked(fit_arguments(data, folder, dim))
        assert code == 0
        references[tag] = cli_signature(folder)
    assert references["old"] != references["new"] and None not in references["new"]

    work = tmp_path / "work"
    work.mkdir()
    generator = np.random.default_rng(20261202)
    outcomes = []
    for kill_after in generator.uniform(0.2, 1.25, size=10) * duration:
        for name, content in zip(("lift.npz", "report.txt"), references["old"][:2], strict=True):
            (work / name).write_bytes(content)
        (work / "plots").mkdir(exist_ok=True)
        for name, content in zip(("eigenvalues.png", "sufficient_summary.png"),
                                 references["old"][2:], strict=True):
            (work / "plots" / name).write_bytes(content)
        code, _ = run_forked(fit_arguments(data, work, 2), kill_after=kill_after)
        state = cli_signature(work)
        staged = bool(temporaries(work))  # killed while its result was being written
        journal = any(path.name == "journal.json" for path in work.rglob("*"))
        assert state in (references["old"], references["new"]) or journal
        # what the next run does first: remove (or roll back) what the killed one left
        for place in (work, work / "plots"):
            remove_stale_temporaries(place)
        state = cli_signature(work)
        outcome = "old" if state == references["old"] else "new"
        assert state == references[outcome], f"mixed result after a kill at {kill_after:.2f} s"
        assert temporaries(work) == []
        outcomes.append((round(float(kill_after), 2), code, staged, outcome))
    assert any(outcome == "old" for *_, outcome in outcomes), outcomes


def test_killed_console_script_leaves_no_mix(tmp_path):
    """The real executable in a fresh interpreter, killed late in its run."""
    data = tmp_path / "synthetic.csv"
    synthetic_table(800, seed=6).to_csv(data, index=False)
    command = [sys.executable, "-c", "from splitlift.cli import main; import sys; "
               "sys.exit(main())"]
    environment = {**os.environ, "PYTHONPATH": SOURCE}
    start = time.perf_counter()
    first = subprocess.run(command + fit_arguments(data, tmp_path, 1), env=environment,
                           capture_output=True, text=True)
    duration = time.perf_counter() - start
    assert first.returncode == 0, first.stderr
    old = cli_signature(tmp_path)
    child = subprocess.Popen(command + fit_arguments(data, tmp_path, 2), env=environment,
                             stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        child.wait(timeout=np.random.default_rng(7).uniform(0.6, 1.0) * duration)
    except subprocess.TimeoutExpired:
        child.send_signal(signal.SIGKILL)
    child.wait()
    for place in (tmp_path, tmp_path / "plots"):
        remove_stale_temporaries(place)
    state = cli_signature(tmp_path)
    if state != old:  # then every file is new, and the report is the lift's own
        assert all(new is not None and new != before for new, before in zip(state, old,
                                                                             strict=True))
        stored = sl.LiftMatrix.load(tmp_path / "lift.npz").metadata["report_text"]
        assert (tmp_path / "report.txt").read_text() == stored + "\n"
    assert temporaries(tmp_path) == []


def _write_many(folder, tag, count):
    for _ in range(count):
        write_result(folder, tag)
    os._exit(0)


def test_concurrent_results_in_the_same_folder_never_mix(tmp_path):
    """Two processes publishing results to the same paths: one wins whole, never a mix."""
    context = multiprocessing.get_context("fork")
    writers = [context.Process(target=_write_many, args=(tmp_path, tag, 15))
               for tag in ("first", "second")]
    for writer in writers:
        writer.start()
    for writer in writers:
        writer.join()
        assert writer.exitcode == 0
    assert result_state(tmp_path) in ("first", "second") and temporaries(tmp_path) == []
