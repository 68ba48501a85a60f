"""Running the packaged workflow: ``gasledger run CAMPAIGN.yaml`` calls Snakemake's command line on the project's
Snakefile and turns its output into one progress line per job.

Snakemake prints a block for every job it starts (``rule NAME:`` with its jobid, wildcards and log) and a
``Finished jobid: N`` line followed by ``k of n steps (p%) done`` when one ends; a failed job gives an
``Error in rule NAME:`` block naming its log. :class:`ProgressReader` reads those lines one at a time and says
what to print; :func:`run_workflow` runs Snakemake in a subprocess and prints it (or, with ``verbose``,
everything Snakemake prints).
"""

from __future__ import annotations

import queue
import re
import shutil
import subprocess
import sys
import threading
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

from pipeline.errors import ConfigError

__all__ = ["RERUN_TRIGGERS", "workflow_root", "snakemake_command", "ProgressReader", "JobInfo", "log_excerpt",
           "run_workflow", "report_path"]

#: What makes Snakemake rerun a job: a changed input file, a changed config section (params) or changed code.
RERUN_TRIGGERS = ("mtime", "params", "input", "code")

_RULE = re.compile(r"^(?:local)?rule (?P<rule>[A-Za-z_][\w]*):\s*$")
_ERROR = re.compile(r"^Error in rule (?P<rule>[A-Za-z_][\w]*):\s*$")
_FIELD = re.compile(r"^\s+(?P<key>jobid|wildcards|log|message): ?(?P<value>.*)$")
_FINISHED = re.compile(r"^Finished job(?:id)?:? (?P<jobid>\d+)")
_STEPS = re.compile(r"^(?P<done>\d+) of (?P<total>\d+) steps \(\d+%\) done")
_NOTHING = re.compile(r"^Nothing to be done")


def workflow_root() -> Path:
    """The folder holding the project's Snakefile (with rules/, report/ and config/schema.yaml beside it).

    The workflow ships with the source tree: it is found next to the ``pipeline`` package of an editable install
    or a source checkout.

    Raises
    ------
    ConfigError
        When there is no Snakefile next to the installed package (e.g. installed from a wheel).
    """
    import pipeline

    root = Path(pipeline.__file__).resolve().parents[1]
    if not ((root / "Snakefile").is_file() and (root / "rules" / "common.smk").is_file()):
        msg = (f"gasledger run: the workflow (Snakefile and rules/) was not found next to the installed package in "
               f"{root}; expected a source checkout installed with 'pip install -e .' (see README, Installing)")
        raise ConfigError(msg)
    return root


def snakemake_command(campaign: str | Path, cores: int | str | None = None, profile: str | None = None,
                      directory: str | Path | None = None, extra: Sequence[str] = (),
                      python: str = sys.executable) -> list[str]:
    """The Snakemake command line that runs ``campaign`` in ``directory`` (default: the current one).

    ``cores`` None leaves the number to the profile when one is given, else uses every core ('all').
    """
    root = workflow_root()
    cmd = [python, "-m", "snakemake", "--snakefile", str(root / "Snakefile"),
           "--configfile", str(Path(campaign).resolve()),
           "--directory", str(Path(directory if directory is not None else Path.cwd()).resolve()),
           "--rerun-triggers", *RERUN_TRIGGERS]
    if cores is not None or profile is None:
        cmd += ["--cores", str(cores if cores is not None else "all")]
    if profile is not None:
        cmd += ["--profile", str(profile)]
    return cmd + list(extra)


@dataclass
class JobInfo:
    """What Snakemake said about one job."""

    rule: str
    jobid: str = ""
    wildcards: str = ""
    log: str = ""
    started: float = 0.0


@dataclass
class ProgressReader:
    """Reads Snakemake's output line by line and returns the progress lines to print instead.

    ``clock`` gives the time in seconds (for the elapsed times); ``failed`` collects the jobs that failed.
    """

    clock: Callable[[], float] = time.monotonic
    jobs: dict[str, JobInfo] = field(default_factory=dict)
    running: dict[str, JobInfo] = field(default_factory=dict)
    failed: list[JobInfo] = field(default_factory=list)
    nothing_to_do: bool = False
    errors: list[list[str]] = field(default_factory=list)   # tracebacks and 'gasledger:' sentences jobs printed
    _block: JobInfo | None = None
    _traceback: list[str] | None = None
    _in_error: bool = False
    _finished: JobInfo | None = None
    _t0: float | None = None

    def feed(self, line: str) -> str | None:
        """Take one line of Snakemake's output; the progress line to print, or None."""
        now = self.clock()
        if self._t0 is None:
            self._t0 = now
        line = line.rstrip("\n")
        if self._traceback is not None:
            self._traceback.append(line)
            if line and not line.startswith((" ", "\t", "Traceback")):
                self.errors.append(self._traceback)          # the exception's own line ends the traceback
                self._traceback = None
            return None
        if line.startswith("Traceback (most recent call last):"):
            self._traceback = [line]
            return None
        if line.startswith("gasledger: "):
            self.errors.append([line])
            return None
        if m := _RULE.match(line):
            self._close_block()
            self._block, self._in_error = JobInfo(rule=m["rule"], started=now), False
            return None
        if m := _ERROR.match(line):
            self._close_block()
            self._block, self._in_error = JobInfo(rule=m["rule"], started=now), True
            return None
        if self._block is not None:
            if m := _FIELD.match(line):
                value = m["value"].strip()
                if m["key"] == "log":
                    value = value.split(" (check log")[0].split(",")[0].strip()
                if m["key"] != "message":
                    setattr(self._block, m["key"], value)
                if m["key"] == "jobid" and not self._in_error:
                    self._register(self._block)            # running from now on (its block may end much later)
                return None
            if line.startswith((" ", "\t")):
                return None
            self._close_block()
        if _NOTHING.match(line):
            self.nothing_to_do = True
            return "nothing to do: every output is up to date"
        if m := _FINISHED.match(line):
            self._finished = self.jobs.get(m["jobid"])
            self.running.pop(m["jobid"], None)
            return None
        if (m := _STEPS.match(line)) and self._finished is not None:
            job, self._finished = self._finished, None
            what = f"{job.rule} {job.wildcards}".strip() if job.wildcards else job.rule
            width = len(m["total"])
            steps = f"[{int(m['done']):>{width}} of {m['total']} steps]"
            if job.rule == "all":                       # the workflow's target rule: nothing of its own to run
                return f"{steps} every output complete  (total {_clock(now - self._t0)})"
            return f"{steps} {what}  ({_seconds(now - job.started)}; total {_clock(now - self._t0)})"
        return None

    def _close_block(self) -> None:
        block, self._block = self._block, None
        if block is None:
            return
        if self._in_error:
            self.running.pop(block.jobid, None)
            known = self.jobs.get(block.jobid)
            if known is not None:
                block.wildcards = block.wildcards or known.wildcards
                block.log = block.log or known.log
            self.failed.append(block)
        elif block.jobid:
            self._register(block)

    def _register(self, block: JobInfo) -> None:
        if block.jobid not in self.jobs:
            self.jobs[block.jobid] = block
            if block.rule != "all":
                self.running[block.jobid] = block

    def status(self) -> str | None:
        """The jobs running now and for how long (None when none is): for a line that is rewritten in place."""
        if not self.running:
            return None
        now = self.clock()
        parts = [f"{(j.rule + ' ' + j.wildcards).strip()} ({_clock(now - j.started)})" for j in self.running.values()]
        return "running: " + "; ".join(parts)

    def finish(self) -> None:
        """End of the output: close a block still open."""
        self._close_block()


def _seconds(s: float) -> str:
    return f"{s:.1f} s" if s < 60 else _clock(s)


def _clock(s: float) -> str:
    m, sec = divmod(int(round(s)), 60)
    return f"{m // 60}:{m % 60:02d}:{sec:02d}" if m >= 60 else f"{m}:{sec:02d}"


def log_excerpt(path: Path, n: int = 12, errors_only: bool = False) -> list[str]:
    """The error lines of a job's log: its last traceback or its ERROR lines, else (unless ``errors_only``) its last
    ``n`` lines."""
    try:
        lines = path.read_text(encoding="utf-8", errors="replace").splitlines()
    except OSError:
        return []
    if any(ln.startswith("Traceback") for ln in lines):
        start = max(i for i, ln in enumerate(lines) if ln.startswith("Traceback"))
        return lines[start:][-n:]
    errors = [ln for ln in lines if " ERROR " in ln or ln.startswith("gasledger:")]
    return errors[-n:] if errors or errors_only else lines[-n:]


def report_path(campaign: str | Path, directory: str | Path | None = None) -> Path:
    """Absolute path of the report a run of ``campaign`` writes: <outdir>/report.html, relative to ``directory``."""
    from pipeline.settings import load_config

    outdir = Path(str(load_config(campaign)["outdir"]))
    base = Path(directory if directory is not None else Path.cwd()).resolve()
    return (outdir if outdir.is_absolute() else base / outdir) / "report.html"


def run_workflow(command: Sequence[str], directory: str | Path | None = None, verbose: bool = False,
                 out=None) -> tuple[int, ProgressReader]:
    """Run ``command`` (a Snakemake command line); print one progress line per job, or everything with ``verbose``.

    On a failure, print each failing rule, its wildcards, the error lines of its log and the log's path (relative
    log paths are taken below ``directory``); on a failure before any job (the campaign refused while the workflow
    is built), Snakemake's last lines. Returns the exit status and the reader.
    """
    out = out if out is not None else sys.stdout
    base = Path(directory if directory is not None else Path.cwd()).resolve()
    reader = ProgressReader()
    tail: list[str] = []
    with subprocess.Popen(list(command), stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True,
                          bufsize=1) as proc:
        try:
            code = _follow(proc, reader, tail, out, verbose)
        except KeyboardInterrupt:                       # Snakemake got the interrupt too and stops its jobs
            proc.wait()
            print("\ninterrupted: run the same command again to go on (Snakemake may ask for -- --unlock first)",
                  file=out, flush=True)
            return 130, reader
    reader.finish()
    if code != 0 and not verbose:
        if reader.failed:
            for job in reader.failed:
                what = f"{job.rule} ({job.wildcards})" if job.wildcards else job.rule
                print(f"failed: {what}", file=out)
                log = Path(job.log) if job.log else None
                if log is not None and not log.is_absolute():
                    log = base / log
                excerpt = log_excerpt(log, errors_only=True) if log is not None else []
                if not excerpt and reader.errors:          # the job's error went to its stderr, not its log
                    excerpt = reader.errors[-1][-12:]
                if not excerpt and log is not None:
                    excerpt = log_excerpt(log)
                for ln in excerpt:
                    print(f"  {ln}", file=out)
                print(f"  log: {log if log is not None else '(none)'}", file=out)
        else:
            for ln in _snakemake_error(tail):
                print(ln, file=out)
        print("(run again with --verbose for Snakemake's full output)", file=out, flush=True)
    return code, reader


def _follow(proc: subprocess.Popen, reader: ProgressReader, tail: list[str], out, verbose: bool) -> int:
    """Read the process's output to its end, printing what :class:`ProgressReader` says (everything with
    ``verbose``; on a terminal also the running jobs on a line rewritten in place); keep its last lines in
    ``tail``. Returns the exit status."""
    assert proc.stdout is not None
    live = not verbose and _is_terminal(out)
    width = shutil.get_terminal_size().columns - 1
    status = ""
    for line in _lines(proc.stdout, 1.0 if live else None):
        if verbose:
            out.write(line)
            out.flush()
            reader.feed(line)
            continue
        shown = None                                      # an empty line: a second without output
        if line:
            tail[:] = (tail + [line.rstrip("\n")])[-40:]
            shown = reader.feed(line)
        if live:
            new_status = (reader.status() or "")[:width]
            if shown is not None or new_status != status:
                out.write("\r" + " " * len(status) + "\r" + (shown + "\n" if shown is not None else "") + new_status)
                out.flush()
                status = new_status
        elif shown is not None:
            print(shown, file=out, flush=True)
    if status:
        out.write("\r" + " " * len(status) + "\r")
        out.flush()
    return proc.wait()


def _is_terminal(out) -> bool:
    try:
        return bool(out.isatty())
    except (AttributeError, ValueError):
        return False


def _lines(stream, tick: float | None):
    """The lines of ``stream``; with ``tick``, also an empty string after every ``tick`` seconds without one."""
    if tick is None:
        yield from stream
        return
    lines: queue.Queue = queue.Queue()

    def pump():
        for line in stream:
            lines.put(line)
        lines.put(None)

    threading.Thread(target=pump, daemon=True).start()
    while True:
        try:
            line = lines.get(timeout=tick)
        except queue.Empty:
            yield ""
            continue
        if line is None:
            return
        yield line


def _snakemake_error(tail: list[str]) -> list[str]:
    """The lines of Snakemake's last output that say why it stopped (its banner and job tables left out)."""
    keep = [ln for ln in tail if ln.strip() and not ln.startswith(("Assuming unrestricted", "Building DAG",
                                                                     "Using shell", "Provided cores",
                                                                     "Rules claiming", "Select jobs",
                                                                     "Execute ", "host:", "Job stats"))]
    marks = [i for i, ln in enumerate(keep) if ln.startswith(("gasledger:", "Error", "WorkflowError",
                                                              "MissingInputException", "ValueError", "SyntaxError"))]
    return keep[marks[0]:] if marks else keep[-15:]
