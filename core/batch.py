"""Processing many shots of a session: worker processes (or a dask cluster) measure, one writer
saves.

Workers read a shot's frames and run ``measure_shot``; only the calling process writes to the
session, saving each result as it arrives, so an interrupted run keeps every finished shot and the
next run resumes with the rest. The same generator serves the command line (a progress bar) and
the window (a worker thread with progress and cancel)::

    for outcome in iter_process(session, workers=2, should_stop=flag.is_set):
        print(outcome.shot_id, outcome.ok, outcome.done, outcome.total)
"""

from __future__ import annotations

import contextlib
import multiprocessing
import os
import signal
import threading
import time
import uuid
from collections.abc import Callable, Iterator
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

from core import STOP_SIGNALS, WakelineError
from core.shot_result import ShotSettings
from core.store import Session, in_exposure_order, read_frames
from core.store.records import ReviewStatus

#: Decisions that rest on the proposals: a new result may send them back to review.
DECIDED = (ReviewStatus.ACCEPTED, ReviewStatus.ADJUSTED)

_POLL_S = 0.2  # how often a waiting run looks at should_stop


@dataclass
class ShotOutcome:
    """One shot finished and saved: ``ok`` or failed with ``message``; ``done`` of ``total``;
    ``decision``: what became of the analyst's decision on it (its proposal moved), or ""."""

    shot_id: str
    ok: bool
    message: str
    done: int
    total: int
    decision: str = ""  # what became of the analyst's decision (Session.save_result), if anything
    reopened: bool = False  # a decided pick (accepted, adjusted) went back to review


@dataclass
class BatchReport:
    """What a run did. ``total`` counts the shots it set out to process."""

    total: int = 0
    processed: list[str] = field(default_factory=list)
    failed: dict[str, str] = field(default_factory=dict)
    skipped: list[str] = field(default_factory=list)  # already done with the same settings
    reopened: list[str] = field(default_factory=list)  # decided picks back to review
    changed: list[str] = field(default_factory=list)  # adjusted picks whose angles changed
    interrupted: bool = False
    elapsed_s: float = 0.0

    @property
    def not_run(self) -> int:
        """Shots left for a later run (stopped before they finished)."""
        return self.total - len(self.processed) - len(self.failed)


def plan_shots(session: Session, shot_ids=None, force: bool = False) -> tuple[list[str], list[str]]:
    """Split the chosen shots into (to process, already processed with the same settings).

    Raises
    ------
    WakelineError
        When a requested shot id is not in the session.
    """
    chosen = list(session) if shot_ids is None else list(dict.fromkeys(shot_ids))
    for shot_id in chosen:
        session[shot_id]  # raises for an unknown id
    todo = [s for s in chosen if force or session.needs_processing(s)]
    planned = set(todo)
    return todo, [s for s in chosen if s not in planned]


def iter_process(
    session: Session,
    shot_ids=None,
    workers: int | None = None,
    scheduler=None,
    force: bool = False,
    should_stop: Callable[[], bool] | None = None,
) -> Iterator[ShotOutcome]:
    """Process shots and yield each outcome right after it is saved in the session.

    Parameters
    ----------
    session : Session
        Open for writing; only this generator's thread touches it while it runs.
    shot_ids : list of str, optional
        Shots to consider (default all); those already processed with the same settings are
        left out unless ``force``.
    workers : int, optional
        Worker processes, each measuring one shot at a time single-threaded (default: one per
        core, no more than free memory holds, see ``default_workers``); 0 measures in this
        process with the PIV settings' own thread count. A worker that dies (out of memory)
        costs only its shot, which is retried once (``_run_pool``).
    scheduler : str or distributed.Client, optional
        ``tcp://host:port`` of a dask scheduler (or a client): measure on that cluster instead.
        Its workers must see the frame files and the session file at the same paths.
    should_stop : callable, optional
        Polled while waiting; when it returns True, unstarted shots are cancelled and the
        generator ends after saving the shots in hand as they finish. Closing the generator
        (or an exception such as KeyboardInterrupt) ends the workers at once.
    """
    todo, _ = plan_shots(session, shot_ids, force)
    if not todo:
        return
    tasks = [_task(session, shot_id) for shot_id in todo]
    backgrounds = _backgrounds(session, tasks)
    fingerprints = {task["shot_id"]: task["fingerprint"] for task in tasks}
    stop = should_stop or (lambda: False)
    runner = _runner(workers, scheduler)
    with session.batch_run(), backgrounds:
        for done, (shot_id, result, message) in enumerate(runner(tasks, stop), start=1):
            decision, reopened = "", False
            if result is not None:
                decided = session[shot_id].pick.status in DECIDED
                decision = session.save_result(shot_id, result)
                reopened = decided and session[shot_id].pick.status == ReviewStatus.TO_REVIEW
            else:
                session.save_failure(shot_id, message, fingerprints[shot_id])
            yield ShotOutcome(shot_id, result is not None, message, done, len(tasks), decision,
                              reopened)


def process_shots(
    session: Session,
    shot_ids=None,
    workers: int | None = None,
    scheduler=None,
    force: bool = False,
    on_result: Callable[[ShotOutcome], None] | None = None,
    should_stop: Callable[[], bool] | None = None,
) -> BatchReport:
    """Run :func:`iter_process` to the end and report; ``on_result(outcome)`` after each shot.

    A stop request (``should_stop``: the shots in hand are finished and saved) or a
    KeyboardInterrupt (they are dropped) ends the run with ``interrupted=True``; every shot
    saved until then stays saved.
    """
    start = time.perf_counter()
    todo, skipped = plan_shots(session, shot_ids, force)
    report = BatchReport(total=len(todo), skipped=skipped)
    stop = should_stop or (lambda: False)
    outcomes = iter_process(session, todo, workers, scheduler, force=True, should_stop=stop)
    try:
        for outcome in outcomes:
            if outcome.ok:
                report.processed.append(outcome.shot_id)
                if outcome.reopened:
                    report.reopened.append(outcome.shot_id)
                elif outcome.decision:
                    report.changed.append(outcome.shot_id)
            else:
                report.failed[outcome.shot_id] = outcome.message
            if on_result is not None:
                on_result(outcome)
    except KeyboardInterrupt:
        report.interrupted = True
    finally:
        outcomes.close()
    report.interrupted = report.interrupted or report.not_run > 0
    report.elapsed_s = time.perf_counter() - start
    return report


# ---------------------------------------------------------------------------------------------
# Work items (plain dicts, picklable, no Session inside)


def _task(session: Session, shot_id: str) -> dict:
    settings = session.settings_for(shot_id)
    return {
        "shot_id": shot_id,
        "source": session.frame_source(shot_id),
        "settings": settings.to_dict(),
        "fingerprint": settings.fingerprint(),
        "shape": session[shot_id].frames.get("shape"),  # (H, W), for the memory it needs
    }


def measure_task(task: dict, piv_threads: int | None = None):
    """Read one shot's frames and measure it (runs in a worker).

    Returns
    -------
    (shot_id, ShotResult or None, message)
        ``message`` is the one-line reason when the shot failed.
    """
    from core.shot import measure_shot

    shot_id = task["shot_id"]
    settings = ShotSettings.from_dict(task["settings"])
    try:
        frame_a, frame_b = in_exposure_order(*read_frames(shot_id, task["source"]),
                                             settings.frames_swapped)
        background = _background_for(task, frame_a)
        # The thread count changes speed, not the result; the stored settings stay the session's.
        run_settings = settings if piv_threads is None else replace(
            settings, piv=replace(settings.piv, workers=piv_threads))
        result = measure_shot(frame_a, frame_b, run_settings, background=background)
        result.settings = settings
        return shot_id, result, ""
    except WakelineError as exc:
        return shot_id, None, str(exc)
    except MemoryError:
        return shot_id, None, "out of memory while measuring"
    except OSError as exc:  # a frame file gone unreadable since import: the file and why
        where = f"{exc.filename}: " if exc.filename else ""
        return shot_id, None, f"{where}cannot be read ({exc.strerror or exc})"
    except Exception as exc:  # noqa: BLE001 - one bad shot must not stop the batch; keep its reason
        text = str(exc).splitlines()[0] if str(exc) else ""
        return shot_id, None, f"{type(exc).__name__}: {text}".rstrip(": ")


#: A camera position's background is the per-pixel minimum or median of the frames of at most
#: this many of its shots (both frames of each): enough for particles and the ball to have
#: moved off every pixel, few enough to read quickly.
BACKGROUND_SHOTS = 24


def _backgrounds(session: Session, tasks: list[dict]):
    """Background images for the tasks whose settings ask for one, per camera position (the
    manifest's ``camera`` column; one position when there is none) and frame size, written to
    a temporary folder beside the session that the returned context removes; each such task gets the paths by
    frame size (:func:`_background_for` picks its own). A shot whose frames cannot be read or
    differ in size is left out of the background (it fails on its own if it is measured)."""
    import tempfile
    from contextlib import ExitStack

    from core.conditioning import background_image

    stack = ExitStack()
    wanted = [t for t in tasks if t["settings"].get("background")]
    if not wanted:
        return stack
    # beside the session, which a cluster's workers see at the same path (``iter_process``);
    # the client's own temporary folder they may not
    folder = Path(stack.enter_context(tempfile.TemporaryDirectory(
        prefix=".wakeline-backgrounds-", dir=Path(session.path).parent)))
    groups: dict[tuple, list[dict]] = {}
    for task in wanted:
        camera = str(session[task["shot_id"]].metadata.get("camera") or "")
        groups.setdefault((camera, task["settings"]["background"]), []).append(task)
    for index, ((camera, method), members) in enumerate(groups.items()):
        paths = {}
        for size, pairs in _frames_by_size(session, camera, members).items():
            path = folder / f"background-{index}-{size}.npy"
            # one shot's two frames: their median is their mean, which holds half of each
            # frame's particle images; their minimum keeps only the light both share
            frames = [f for pair in pairs for f in pair]
            np.save(path, background_image(frames, method if len(pairs) > 1 else "min"))
            paths[size] = str(path)
        for task in members:
            task["background"] = {"camera": camera, "paths": paths}
    return stack


def _frames_by_size(session: Session, camera: str, tasks: list[dict]) -> dict[str, list]:
    """Frame pairs of the first ``BACKGROUND_SHOTS`` readable shots at a camera position of
    each frame size (``"WxH"``, from the files' headers) that one of ``tasks`` has."""
    from core.store.frames import frames_size

    sources = {shot_id: session.frame_source(shot_id) for shot_id in session
               if str(session[shot_id].metadata.get("camera") or "") == camera}
    sizes = {shot_id: frames_size(source) for shot_id, source in sources.items()}
    wanted = {sizes.get(task["shot_id"]) for task in tasks} - {None}
    by_size: dict[str, list] = {}
    for shot_id, shape in sizes.items():
        if shape not in wanted or len(by_size.get(_size(shape), ())) >= BACKGROUND_SHOTS:
            continue
        try:
            a, b = read_frames(shot_id, sources[shot_id])
        except (WakelineError, OSError):
            continue
        if a.shape == b.shape == shape:
            by_size.setdefault(_size(shape), []).append((a, b))
    return by_size


def _size(frame_or_shape) -> str:
    """``"WxH"`` of a frame or an ``(H, W)`` shape."""
    height, width = getattr(frame_or_shape, "shape", frame_or_shape)
    return f"{width}x{height}"


def _background_for(task: dict, frame) -> np.ndarray | None:
    """The background of a task's camera position and frame size, None when it asks for none.

    Raises
    ------
    WakelineError
        When no readable shot of the position has frames of its size (its own file's
        header could not be read, say).
    """
    given = task.get("background")
    if not given:
        return None
    path = given["paths"].get(_size(frame))
    if path is None:
        where = f"camera {given['camera']!r}" if given["camera"] else "the camera position"
        sizes = ", ".join(given["paths"]) or "none readable"
        raise WakelineError(
            f"background: no readable shot of {where} has frames of {_size(frame)} px "
            f"(backgrounds made: {sizes})")
    return np.load(path)


def _runner(workers: int | None, scheduler):
    if scheduler is not None:
        return lambda tasks, stop: _run_dask(tasks, stop, scheduler)
    if workers == 0:
        return _run_inline
    if workers is not None and workers < 0:
        raise WakelineError(f"--workers {workers}: use 0 or more")
    return lambda tasks, stop: _run_pool(tasks, stop, workers or default_workers(tasks))


def _run_inline(tasks: list[dict], stop) -> Iterator[tuple]:
    for task in tasks:
        if stop():
            return
        yield measure_task(task)


# -- worker processes ---------------------------------------------------------------------------

#: Peak memory of one worker measuring an H x W pair, bytes: the line through the peaks measured
#: for 4096 x 4096 (1.1 GB) and 8000 x 8000 (3.4 GB) pairs of the measurement (docs/references.md).
_PEAK_BASE_BYTES = 0.28e9
_PEAK_BYTES_PER_PX = 48.7


def peak_memory_bytes(shape) -> float:
    """About the most memory one worker needs to measure a frame pair of ``shape`` (H, W)."""
    return _PEAK_BASE_BYTES + _PEAK_BYTES_PER_PX * shape[0] * shape[1]


def available_memory_bytes() -> float | None:
    """Memory free for new work: ``MemAvailable`` (Linux), within this process group's cgroup
    limit if it has one; None where neither can be read."""
    free = None
    with contextlib.suppress(OSError, ValueError, IndexError):
        for line in Path("/proc/meminfo").read_text().splitlines():
            if line.startswith("MemAvailable:"):
                free = int(line.split()[1]) * 1024
    with contextlib.suppress(OSError, ValueError):
        limit = Path("/sys/fs/cgroup/memory.max").read_text().strip()
        if limit != "max":
            room = int(limit) - int(Path("/sys/fs/cgroup/memory.current").read_text())
            free = room if free is None else min(free, room)
    return free


def default_workers(tasks: list[dict]) -> int:
    """One worker per core, but no more than the free memory holds at the largest pair's peak."""
    cores = os.cpu_count() or 1
    free = available_memory_bytes()
    shapes = [task["shape"] for task in tasks if task.get("shape")]
    if free is None or not shapes:
        return cores
    return max(1, min(cores, int(free // max(peak_memory_bytes(s) for s in shapes))))


_announce = None  # in a worker: where it says which shot it starts (see _run_pool)


def _worker_start(lifeline, announce) -> None:
    """Set up a worker. Signals belong to the writer, which stops the run cleanly while the
    workers finish their shots; and a worker ends as soon as the writer does, however it ended
    (killed, out of memory): its lifeline then reads end-of-file."""
    global _announce
    for signum in STOP_SIGNALS:
        signal.signal(signum, signal.SIG_IGN)
    _announce = announce
    threading.Thread(target=_end_with_writer, args=(lifeline,), daemon=True).start()


def _end_with_writer(lifeline) -> None:
    with contextlib.suppress(EOFError, OSError):
        lifeline.recv_bytes()
    os._exit(1)


def _in_worker(work, task: dict, threads: int):
    _announce.send_bytes(task["shot_id"].encode("utf-8"))
    return work(task, threads)


def pool_context():
    """The start method of wakeline's worker processes (the batch's, the demo's drawing).

    Not fork: the parent may run Qt or other threads, which fork does not copy safely."""
    if "forkserver" not in multiprocessing.get_all_start_methods():
        return multiprocessing.get_context("spawn")
    context = multiprocessing.get_context("forkserver")
    # Workers fork from a server that has imported the measurement once: quick pool start-up.
    context.set_forkserver_preload(
        ["core.batch", "core.piv", "core.ball", "core.fields", "core.separation"])
    _start_forkserver_deaf()
    return context


def _start_forkserver_deaf() -> None:
    """Start the fork server with the stop signals blocked, which it keeps across its exec
    for its whole life, as the workers it forks do (they ignore them anyway: the writer's;
    they end with the writer or by SIGKILL, never by these).

    Python's fork server ignores Ctrl-C only once it has imported its preloaded modules; a
    Ctrl-C to the process group in the seconds before (scipy's imports) ended it, and the
    writer then failed on its closed pipe instead of stopping cleanly. A signal that arrives
    while this thread blocks them waits, and is the writer's once they are unblocked.
    """
    from multiprocessing import forkserver, resource_tracker

    # the fork server starts the resource tracker first, which unblocks SIGINT and SIGTERM
    # (not restoring the mask it found) as it starts: started before, it is left running
    resource_tracker.ensure_running()
    blocked = signal.pthread_sigmask(signal.SIG_BLOCK, STOP_SIGNALS)
    try:
        forkserver.ensure_running()
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, blocked)


def _run_pool(tasks: list[dict], stop, count: int, work=None) -> Iterator[tuple]:
    """Measure on ``count`` worker processes (``concurrent.futures``), yielding outcomes.

    A worker that dies (killed by the out-of-memory killer, or crashed) breaks its pool: a new
    pool of half the size takes the shots that were waiting, and each shot that was being
    measured is retried once, alone; one that kills its worker again fails, naming memory as
    the likely cause. Workers say which shot they start (a pipe), so only those are suspects.
    Asked to ``stop``, no new shot starts and the shots in hand are finished and yielded; an
    abort (an exception, or the generator closed) ends the workers at once. ``work`` stands in
    for ``measure_task`` in tests.
    """
    context = pool_context()
    lifeline, keep_alive = context.Pipe(duplex=False)  # workers end when keep_alive closes
    started, announce = context.Pipe(duplex=False)
    rounds = [(list(tasks), count)]
    strikes: dict[str, int] = {}
    try:
        while rounds and not stop():
            todo, workers = rounds.pop(0)
            in_hand, waiting = yield from _pool_round(todo, stop, workers, work or measure_task,
                                                      context, (lifeline, announce, started),
                                                      keep_alive)
            if waiting:
                rounds.append((waiting, max(1, workers // 2)))
            for task in in_hand:
                strikes[task["shot_id"]] = strikes.get(task["shot_id"], 0) + 1
                if strikes[task["shot_id"]] > 1:
                    yield task["shot_id"], None, _lost_twice(task)
                else:
                    rounds.append(([task], 1))
    finally:
        for end in (keep_alive, lifeline, started, announce):
            end.close()


def _pool_round(todo, stop, workers, work, context, pipes, keep_alive):
    """One pool over ``todo``, yielding outcomes; returns the tasks lost with a dead worker:
    (those being measured, those waiting).

    Shots are handed to the pool one per idle worker, not all at once: the pool queues what it
    is given ahead of its workers, and a queued shot can no longer be cancelled, so a stop would
    still start it."""
    lifeline, announce, started = pipes
    # One worker process is one core's worth of work: the PIV inside it runs single-threaded.
    size = min(workers, len(todo))
    pool = ProcessPoolExecutor(size, mp_context=context, initializer=_worker_start,
                               initargs=(lifeline, announce))
    queue, futures, lost = list(todo), {}, ([], [])
    pending, begun = set(), set()
    broken = ended = False
    try:
        while True:
            stopping = stop()  # asked once per look: a stop hands out nothing more
            while queue and len(pending) < size and not broken and not stopping:
                task = queue.pop(0)
                try:
                    future = pool.submit(_in_worker, work, task, 1)
                except BrokenProcessPool:  # a worker died: the shot waits for the next pool
                    broken = True
                    queue.insert(0, task)
                    break
                futures[future] = task
                pending.add(future)
            if not pending:
                break
            done, pending = wait(pending, timeout=_POLL_S, return_when=FIRST_COMPLETED)
            while started.poll():
                begun.add(started.recv_bytes().decode("utf-8"))
            for future in done:
                task = futures[future]
                if isinstance(future.exception(), BrokenProcessPool):
                    broken = True
                    lost[0 if task["shot_id"] in begun else 1].append(task)
                    continue
                yield _pool_outcome(future, task["shot_id"])
        ended = True
    finally:
        if not ended:
            keep_alive.close()  # an abort: the workers end now instead of finishing their shots
        if broken:
            _end_workers(pool)
        pool.shutdown(wait=True, cancel_futures=True)
    if broken:
        lost[1].extend(queue)
    return lost


def _end_workers(pool: ProcessPoolExecutor) -> None:
    """End a broken pool's remaining workers at once. ``concurrent.futures`` stops them with
    SIGTERM, which they ignore (signals belong to the writer: :func:`_worker_start`), and then
    waits for them: once in several runs of the test suite a worker that did not leave on its
    own held the pool's shutdown, and the run, for good. Their shots are lost with the pool
    either way (retried, :func:`_run_pool`). The processes are the pool's own record (no public
    one exists)."""
    for process in list((getattr(pool, "_processes", None) or {}).values()):
        with contextlib.suppress(Exception):
            process.kill()


def _lost_twice(task: dict) -> str:
    shape = task.get("shape")
    need = "" if not shape else (f": a {shape[1]} x {shape[0]} pair needs about "
                                 f"{peak_memory_bytes(shape) / 1e9:.1f} GB per worker")
    return (f"the worker process measuring this shot died twice, most likely out of memory"
            f"{need}; run it with fewer --workers or more free memory")


def _pool_outcome(future, shot_id: str) -> tuple:
    try:
        return future.result()
    except Exception as exc:  # noqa: BLE001 - the worker process crashed otherwise
        return shot_id, None, f"worker process failed ({type(exc).__name__})"


def _run_dask(tasks: list[dict], stop, scheduler) -> Iterator[tuple]:
    try:
        import distributed
    except ImportError:
        raise WakelineError(
            "--scheduler needs dask.distributed (install the 'cluster' extra)") from None
    own = isinstance(scheduler, str)
    try:
        client = distributed.Client(scheduler, set_as_default=False, timeout=10) if own else scheduler
    except (OSError, TimeoutError) as exc:
        raise WakelineError(f"{scheduler}: cannot reach the dask scheduler ({exc})") from None
    run = uuid.uuid4().hex[:8]
    futures = {client.submit(measure_task, task, 1, key=f"wakeline-{run}-{i}", pure=False):
               task["shot_id"] for i, task in enumerate(tasks)}
    arriving = distributed.as_completed(list(futures), loop=client.loop)
    try:
        while not arriving.is_empty() and not stop():
            ready = arriving.next_batch(block=False)
            if not ready:
                time.sleep(_POLL_S / 4)
            for future in ready:
                yield _dask_outcome(future, futures[future])
    finally:
        unfinished = [f for f in futures if not f.done()]
        if unfinished:
            client.cancel(unfinished)
        if own:
            client.close()


def _dask_outcome(future, shot_id: str) -> tuple:
    try:
        return future.result()
    except Exception as exc:  # noqa: BLE001 - the task was lost on the cluster
        return shot_id, None, f"cluster task failed ({type(exc).__name__}: {exc})"
