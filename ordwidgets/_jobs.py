"""``JobRunner``: the long-work runner of one :class:`~ordwidgets.state.FitState`.

Long work (the link comparison, proportional-odds tests, a residual refresh after an edit)
runs inline, or on a thread pool when the runner has one.  The lifecycle is explicit:

* :meth:`JobRunner.submit` runs ``work()`` and hands its result (or the exception it
  raised) to ``done``.  Jobs carry a *kind*: a newer job of the same kind supersedes an older
  one -- a queued one is cancelled, a running one has its result dropped -- so superseded
  work never piles up and only the latest request of each kind is answered.
* ``done`` is called only while the job is still wanted (its ``wanted()`` check, for example
  "the fit has not changed", passes at the end).
* :meth:`JobRunner.close` cancels queued jobs, drops the results of running ones, waits for
  the threads to end, clears the busy labels and calls each dropped job's ``stopped``
  callback, so that whoever waited for an answer can say there will be none (or compute it
  inline).  Work submitted afterwards runs inline, so
  a closed state keeps working (slower, never stuck); so does work submitted to a pool that
  someone else shut down.
"""
from __future__ import annotations

import itertools
import threading
from concurrent.futures import ThreadPoolExecutor

__all__ = ["JobRunner", "THREAD_PREFIX"]

#: Name prefix of the threads a runner starts itself (see :meth:`JobRunner.start_threads`).
THREAD_PREFIX = "ow-long"


class JobRunner:
    """Run long work inline or on an executor, newest request of each kind first.

    Parameters
    ----------
    executor : concurrent.futures.Executor, optional
        Run jobs here; ``None`` runs them inline.  The runner shuts it down on :meth:`close`.
    on_busy : callable, optional
        Called with the comma-separated labels of the jobs running (``""`` when idle).
    """

    def __init__(self, executor=None, *, on_busy=None):
        self.executor = executor
        self._on_busy = on_busy or (lambda text: None)
        self._lock = threading.RLock()
        self._idle = threading.Condition(self._lock)
        self._labels, self._latest, self._futures, self._open = [], {}, {}, 0
        self._stopped = {}
        self._tickets = itertools.count()

    @property
    def background(self) -> bool:
        """Whether jobs run on an executor (``False``: inline)."""
        return self.executor is not None

    @property
    def busy(self) -> str:
        """Labels of the jobs submitted and not yet finished, in order."""
        return ", ".join(self._labels)

    def start_threads(self, n=2):
        """Give the runner its own pool of ``n`` threads (named ``ow-long-*``)."""
        if self.executor is None:
            self.executor = ThreadPoolExecutor(max_workers=n, thread_name_prefix=THREAD_PREFIX)
        return self

    def submit(self, kind, label, work, done, *, wanted=None, stopped=None):
        """Run ``work()`` then ``done(result)``; an exception raised by ``work`` is the result.

        Parameters
        ----------
        kind : hashable or None
            A newer job of the same kind supersedes this one (``None``: never superseded).
        label : str
            Shown in the busy labels while the job runs.
        wanted : callable, optional
            Checked when the job ends; ``done`` is skipped when it returns false.
        stopped : callable, optional
            Called (with no argument) if :meth:`close` drops this job before ``done`` ran.
        """
        with self._lock:
            ticket = next(self._tickets)
            key = ("job", ticket) if kind is None else kind
            self._latest[key] = ticket
            self._stopped[key] = stopped
            old = self._futures.pop(key, None)
            self._open += 1
            self._add_label(label)
        if old is not None:
            old.cancel()
        check = wanted or (lambda: True)

        def finish(result, ran=True):
            with self._lock:
                self._remove_label(label)
                current = self._latest.get(key) == ticket
                if current:
                    self._latest.pop(key, None)
                    self._futures.pop(key, None)
                    self._stopped.pop(key, None)
            try:
                if ran and current and check():
                    done(result)
            finally:
                with self._lock:
                    self._open -= 1
                    self._idle.notify_all()

        future = self._start(work)
        if future is None:
            finish(_result_or_error(work))
            return
        with self._lock:
            if self._latest.get(key) == ticket:
                self._futures[key] = future
        future.add_done_callback(lambda f: finish(None, False) if f.cancelled() else finish(f.result()))

    def _start(self, work):
        executor = self.executor
        if executor is None:
            return None
        try:
            return executor.submit(_result_or_error, work)
        except RuntimeError:  # shut down by its owner: run inline from now on
            self.executor = None
            return None

    def wait(self, timeout=None) -> bool:
        """Wait until every job has ended and its ``done`` returned; ``False`` on timeout."""
        with self._lock:
            return self._idle.wait_for(lambda: self._open == 0, timeout=timeout)

    def close(self):
        """Cancel queued jobs, drop running ones, stop the threads and clear the busy labels."""
        with self._lock:
            executor, self.executor = self.executor, None
            futures = list(self._futures.values())
            stopped = [f for f in self._stopped.values() if f is not None]
            self._latest.clear()
            self._futures.clear()
            self._stopped.clear()
        for future in futures:
            future.cancel()
        if executor is not None:
            executor.shutdown(wait=True, cancel_futures=True)
        with self._lock:
            self._labels = []
            self._on_busy("")
        for callback in stopped:
            callback()

    def _add_label(self, label):
        self._labels.append(label)
        self._on_busy(self.busy)

    def _remove_label(self, label):
        if label in self._labels:
            self._labels.remove(label)
            self._on_busy(self.busy)


def _result_or_error(work):
    try:
        return work()
    except Exception as exc:  # noqa: BLE001 - handed to ``done``, which shows it
        return exc
