"""Progress of long work in a batch log (stderr a file, not a terminal): one plain line per task
or per 5% of the tasks, with the count done/total and the time left; nothing for an in-memory
stream or with show_progress=False."""

import contextlib
import io
import re

from topology.execution import SerialEngine, Task, run_tasks
from topology.progress import duration, progress
from topology.store import MemoryStore

LINE = re.compile(r"^topology run: (\d+)/(\d+) tasks done \((\d+)%\), (.+) elapsed(?:, about (.+) left)?$")


def _square(x):
    return x * x


def _log_lines(path):
    return path.read_text().splitlines()


def test_run_tasks_writes_a_line_per_five_percent_to_a_log(tmp_path):
    # 60 tasks, 12 of them finished before (a resumed run): a line per 3 tasks (5% of 60)
    store = MemoryStore()
    tasks = [Task(f"t{i}", _square, {"x": i}) for i in range(60)]
    for t in tasks[:12]:
        store.put(t.id, 0, t.key)
    log = tmp_path / "batch.log"
    with open(log, "w") as fh, contextlib.redirect_stderr(fh):
        counts = run_tasks(tasks, store, SerialEngine())
    assert counts["computed"] == 48 and counts["reused"] == 12
    lines = _log_lines(log)
    assert lines[0] == "topology run: 48 of 60 tasks to run (12 finished before, kept)"
    done = [LINE.match(ln) for ln in lines[1:]]
    assert all(done), lines
    counts = [int(m.group(1)) for m in done]
    assert counts == list(range(15, 61, 3))  # every 5% from the first step after the kept 12, and the end
    assert all(m.group(2) == "60" and int(m.group(3)) == round(100 * int(m.group(1)) / 60) for m in done)
    assert all(m.group(5) for m in done[:-1]) and done[-1].group(5) is None  # the last line has nothing left


def test_a_line_per_task_for_few_tasks_and_nothing_when_quiet_or_in_memory(tmp_path):
    tasks = [Task(f"t{i}", _square, {"x": i}) for i in range(7)]
    log = tmp_path / "batch.log"
    with open(log, "w") as fh, contextlib.redirect_stderr(fh):
        run_tasks(tasks, MemoryStore(), SerialEngine())
    assert [int(LINE.match(ln).group(1)) for ln in _log_lines(log)[1:]] == list(range(1, 8))
    with open(log, "w") as fh, contextlib.redirect_stderr(fh):
        run_tasks(tasks, MemoryStore(), SerialEngine(), show_progress=False)  # --quiet
    assert log.read_text() == ""
    memory = io.StringIO()  # no file descriptor: neither a terminal nor a log (a capture)
    with contextlib.redirect_stderr(memory):
        run_tasks(tasks, MemoryStore(), SerialEngine())
    assert memory.getvalue() == ""


def test_time_left_is_the_rate_of_this_process_times_the_tasks_left():
    # a fake clock: 2 of 40 tasks kept; then each task takes 1.5 s. After n tasks in all, the
    # n - 2 done here took 1.5 (n - 2) s, and 40 - n are left at 1.5 s each
    now = [100.0]
    out = io.StringIO()
    bar = progress(40, "topology run", True, initial=2, stream=out, clock=lambda: now[0])
    for _ in range(38):
        now[0] += 1.5
        bar.update(1)
    bar.close()
    lines = out.getvalue().splitlines()
    assert lines[0] == "topology run: 38 of 40 tasks to run (2 finished before, kept)"
    assert lines[1] == "topology run: 4/40 tasks done (10%), 3 s elapsed, about 54 s left"
    assert lines[5] == "topology run: 12/40 tasks done (30%), 15 s elapsed, about 42 s left"
    assert lines[-1] == "topology run: 40/40 tasks done (100%), 57 s elapsed"
    assert len(lines) == 1 + 19  # 4, 6, ..., 40
    assert [duration(s) for s in (0.4, 59.6, 61, 3599, 3600 * 3 + 20 * 60 + 5)] == [
        "0 s", "1 min 0 s", "1 min 1 s", "59 min 59 s", "3 h 20 min"]
