"""Fork server for the kill test: imports sweeper once, then runs each `sweeper` command in a
forked child process, so that twenty and more runs can be started and SIGKILLed in seconds
(a fresh interpreter spends one to several seconds importing numpy, scipy, h5py and pyvisa).

Each child is a real process running the real command line (`sweeper.cli.main`), as
`python -m sweeper ...` would after its imports; the test kills it with SIGKILL.

Protocol, one JSON object per line: stdin {"op": "start", "argv": [...], "cwd": dir, "log": file}
answers {"pid": n}; {"op": "wait", "pid": n} answers {"signal": s or null, "code": c or null}
once the child has ended; end of input ends the server.
"""

from __future__ import annotations

import json
import os
import sys

import sweeper.cli  # noqa: F401 - loads every command module
import sweeper.run.resume  # noqa: F401 - and what the commands import when they run
import sweeper.run.runner  # noqa: F401
import sweeper.sim  # noqa: F401
from sweeper.cli import main


def child(request: dict) -> None:
    """In the forked child: output to the log file, run the command, exit with its code."""
    code = 1
    try:
        fd = os.open(request["log"], os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o644)
        os.dup2(fd, 1)
        os.dup2(fd, 2)
        os.close(fd)
        sys.stdin.close()
        sys.stdout = open(1, "w", encoding="utf-8", buffering=1, closefd=False)
        sys.stderr = open(2, "w", encoding="utf-8", buffering=1, closefd=False)
        os.chdir(request["cwd"])
        main.main(args=request["argv"], prog_name="sweeper", standalone_mode=True)
        code = 0
    except SystemExit as exc:
        code = exc.code if isinstance(exc.code, int) else 1
    finally:
        try:
            sys.stdout.flush()
            sys.stderr.flush()
        finally:
            os._exit(code)


def serve() -> None:
    for line in sys.stdin:
        request = json.loads(line)
        if request["op"] == "start":
            pid = os.fork()
            if pid == 0:
                child(request)
            reply = {"pid": pid}
        else:
            _, status = os.waitpid(request["pid"], 0)
            reply = {
                "signal": os.WTERMSIG(status) if os.WIFSIGNALED(status) else None,
                "code": os.WEXITSTATUS(status) if os.WIFEXITED(status) else None,
            }
        sys.stdout.write(json.dumps(reply) + "\n")
        sys.stdout.flush()


if __name__ == "__main__":
    serve()
