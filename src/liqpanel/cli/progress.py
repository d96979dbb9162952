"""One line per stage while the workflow runs, everything when it fails.

``liqpanel run`` and ``liqpanel study`` start the workflow engine and read
its output through :func:`follow`: a line when a stage (a rule) first starts,
with the jobs done so far, and a last line with the count. The engine's full
output is still written to its own log (``.snakemake/log/``); when a job
fails, the lines from the first error on are shown as they come, with the log's
path, so nothing needed to mend the run is hidden. ``--verbose`` bypasses this.
"""

from __future__ import annotations

import re
from typing import IO, Callable, Iterable

_RULE = re.compile(r"^\s*(?:local)?rule (\w+):\s*$")
_STEPS = re.compile(r"^\s*(\d+) of (\d+) steps \(\d+%\) done\s*$")
_FAILURE = ("Error in rule", "Error:", "WorkflowError", "Exiting because", "Traceback", "MissingInputException",
            "IncompleteFilesException", "LockException")
_LOG = re.compile(r"^Complete log(?:\(s\))?: (.+)$")
_RAISED = re.compile(r'^\w+ in file ".*", line \d+:$')  # an exception raised in a job, printed before its rule


def follow(lines: Iterable[str], out: IO[str], err: IO[str] | None = None, *,
           explained: Callable[[], bool] | None = None) -> dict:
    """Echo the progress of a workflow run from its output ``lines`` to ``out``.

    The engine's messages on a failure, and liqpanel's own messages (lines
    starting ``liqpanel:``), go to ``err`` (default ``out``). With
    ``explained``, the engine's messages are held back until the end and
    left out when ``explained()`` says the failure is one of our own errors
    (a bad input or setting, repeated by the caller as one ``liqpanel:``
    line); the log's path is still given.

    Returns what was seen: ``stages`` (in order of first start), ``done`` and
    ``total`` jobs, ``failed`` and the engine's ``log`` path.
    """
    err = err or out
    stages: list[str] = []
    done = total = 0
    failed = False
    log = None
    held: list[str] = []
    for line in lines:
        if m := _STEPS.match(line):
            done, total = int(m.group(1)), int(m.group(2))
        elif (m := _RULE.match(line)) and m.group(1) not in stages and m.group(1) != "all":
            stages.append(m.group(1))
            out.write(f"  {m.group(1)}" + (f"  ({done} of {total} jobs done)" if total else "") + "\n")
        elif m := _LOG.match(line.strip()):
            log = m.group(1)
        if not failed and (line.lstrip().startswith(_FAILURE) or _RAISED.match(line.rstrip("\n"))):
            failed = True
        text = line if line.endswith("\n") else line + "\n"
        if explained is not None and failed and not line.startswith("liqpanel:"):
            held.append(text)
        elif failed or line.startswith("liqpanel:"):
            err.write(text)
            err.flush()
        out.flush()
    if total:
        out.write(f"  {done} of {total} jobs done\n")
    elif not failed:
        out.write("  nothing to run: every output is up to date\n")
    if held and not explained():
        err.write("".join(held))
    if failed and log:
        err.write(f"full log of the run: {log}\n")
    return {"stages": stages, "done": done, "total": total, "failed": failed, "log": log}
