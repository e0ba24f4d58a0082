"""Progress on long work: a live bar on a terminal, plain periodic lines otherwise.

Overnight logs are redirected files: there a carriage-return bar would be one unreadable line,
so without a terminal the reporter prints one plain line per run every ``interval`` seconds
and one when a run ends.
"""

from __future__ import annotations

import sys
import time
from dataclasses import dataclass, field

__all__ = ["Progress", "CountProgress"]


def _fmt(v) -> str:
    return "-" if v is None or v != v else f"{v:.5g}"


@dataclass
class Progress:
    total_runs: int
    total_evals: int
    stream: object = field(default_factory=lambda: sys.stderr)
    interval: float = 10.0
    tty: bool | None = None
    runs: dict = field(default_factory=dict)
    done: int = 0
    failed: int = 0
    _last: float = 0.0
    _last_line: dict = field(default_factory=dict)

    @classmethod
    def for_study(cls, study, budget: int | None = None) -> "Progress":
        """Progress of every run of a study (``budget`` evaluations each, or its own)."""
        runs = study.runs()
        return cls(total_runs=len(runs),
                   total_evals=sum(budget or r.search["max_evaluations"] for r in runs))

    def __post_init__(self):
        if self.tty is None:
            isatty = getattr(self.stream, "isatty", None)
            self.tty = bool(isatty and isatty())
        self._t0 = time.time()

    def update(self, msg: dict) -> None:
        """Take one message from a run: run, generation, evaluations, best, feasible, sigma."""
        self.runs[msg["run"]] = msg
        now = time.time()
        if self.tty:
            if now - self._last > 0.2:
                self._draw()
                self._last = now
        elif now - self._last_line.get(msg["run"], 0.0) >= self.interval:
            self._line(msg, "")
            self._last_line[msg["run"]] = now

    def run_ended(self, run: str, state: str, best=None, error: str | None = None,
                  summary: dict | None = None) -> None:
        if state == "complete":
            self.done += 1
        else:
            self.failed += 1
        msg = dict(self.runs.get(run, {"run": run}))
        if summary:
            msg.update({k: summary[k] for k in ("generations", "evaluations") if k in summary})
            msg.setdefault("generation", summary.get("generations", 0))
            if "generations" in summary:
                msg["generation"] = summary["generations"]
        self.runs[run] = msg
        tail = f"{state}" + (f": {error}" if error else "")
        if self.tty:
            self.stream.write("\r\033[K")
        self._line({**msg, "best": best if best is not None else msg.get("best")}, tail)
        if self.tty:
            self._draw()

    def _line(self, msg: dict, tail: str) -> None:
        stamp = time.strftime("%H:%M:%S")
        self.stream.write(
            f"[{stamp}] run {msg['run']}  gen {msg.get('generation', 0)}  "
            f"evals {msg.get('evaluations', 0)}  best feasible so far {_fmt(msg.get('best'))}  "
            f"{100 * msg.get('feasible', 0.0):.0f}% of this generation feasible  "
            f"sigma {_fmt(msg.get('sigma'))}"
            f"{'  ' + tail if tail else ''}\n")
        self.stream.flush()

    def _draw(self) -> None:
        evals = sum(m.get("evaluations", 0) for m in self.runs.values())
        frac = min(1.0, evals / max(self.total_evals, 1))
        width = 28
        bar = "#" * int(frac * width) + "." * (width - int(frac * width))
        best = [m.get("best") for m in self.runs.values() if m.get("best") == m.get("best")
                and m.get("best") is not None]
        rate = evals / max(time.time() - self._t0, 1e-9)
        self.stream.write(
            f"\r\033[K[{bar}] {100 * frac:5.1f}%  runs {self.done}/{self.total_runs} done"
            f"{f', {self.failed} failed' if self.failed else ''}  evals {evals}  "
            f"best feasible {_fmt(min(best) if best else None)}  {rate:.0f} evals/s")
        self.stream.flush()

    def close(self) -> None:
        if self.tty:
            self.stream.write("\n")
            self.stream.flush()


@dataclass
class CountProgress:
    """Progress of a counted job (``exporting 12/40``): a bar on a terminal, a line every
    ``interval`` seconds otherwise."""

    label: str
    total: int
    stream: object = field(default_factory=lambda: sys.stderr)
    interval: float = 5.0
    done: int = 0

    def __post_init__(self):
        isatty = getattr(self.stream, "isatty", None)
        self.tty = bool(isatty and isatty())
        self._last = time.time()

    def step(self, n: int = 1) -> None:
        self.done += n
        now = time.time()
        if self.tty:
            self.stream.write(f"\r\033[K{self.label} {self.done}/{self.total}")
        elif now - self._last >= self.interval or self.done == self.total:
            self.stream.write(f"{self.label} {self.done}/{self.total}\n")
            self._last = now
        self.stream.flush()

    def close(self) -> None:
        if self.tty:
            self.stream.write("\n")
            self.stream.flush()
