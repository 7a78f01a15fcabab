"""Long plan runs in a thread pool, with progress the pages poll (``GET /api/jobs/{id}``).

A plan of thousands of blocks takes seconds; running it in the pool keeps every
other request answering meanwhile. The library's ``progress(done, total)``
callback feeds the job's counters.
"""

from __future__ import annotations

import secrets
import threading
import time
from collections import OrderedDict
from collections.abc import Callable
from dataclasses import dataclass, field

__all__ = ["Job", "Jobs"]

_KEEP = 200  # finished jobs remembered, oldest forgotten first


@dataclass
class Job:
    id: str
    kind: str
    status: str = "queued"  # queued, running, done, failed
    done: int = 0
    total: int = 0
    started: float = field(default_factory=time.monotonic)
    finished: float | None = None
    result: dict | None = None
    error: dict | None = None

    def progress(self, done: int, total: int) -> None:
        self.done, self.total = int(done), int(total)

    def to_dict(self) -> dict:
        end = self.finished if self.finished is not None else time.monotonic()
        return {
            "id": self.id,
            "kind": self.kind,
            "status": self.status,
            "done": self.done,
            "total": self.total,
            "seconds": round(end - self.started, 2),
            "result": self.result,
            "error": self.error,
        }


class Jobs:
    """Submit callables taking a ``progress`` callback; look them up by id."""

    def __init__(self, executor, *, workspace=None) -> None:
        self.executor = executor
        self.workspace = workspace
        self._jobs: OrderedDict[str, Job] = OrderedDict()
        self._lock = threading.Lock()

    def submit(self, kind: str, fn: Callable[[Callable[[int, int], None]], dict]) -> Job:
        job = Job(id=secrets.token_urlsafe(12), kind=kind)
        with self._lock:
            self._jobs[job.id] = job
            while len(self._jobs) > _KEEP:
                self._jobs.popitem(last=False)

        def run():
            from fieldplan.web.errors import error_payload, guess_parameter, scrub

            job.status = "running"
            try:
                job.result = fn(job.progress)
                job.status = "done"
            except Exception as err:  # reported to the page, never a traceback
                from fieldplan.errors import FieldplanError
                from fieldplan.web.workspace import WebError

                if isinstance(err, WebError):
                    job.error = error_payload(err.status, scrub(str(err), self.workspace), err.parameter)
                elif isinstance(err, FieldplanError):
                    job.error = error_payload(
                        400,
                        scrub(str(err), self.workspace),
                        getattr(err, "param", None) or guess_parameter(str(err)),
                    )
                else:
                    import logging

                    logging.getLogger(__name__).exception("job %s failed", job.id)
                    job.error = error_payload(
                        500, f"internal error ({type(err).__name__}); see the server log", None
                    )
                job.status = "failed"
            finally:
                job.finished = time.monotonic()

        job.future = self.executor.submit(run)
        return job

    def get(self, job_id: str) -> Job | None:
        with self._lock:
            return self._jobs.get(job_id)
