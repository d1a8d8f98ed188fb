"""Forks ``wellspan`` command processes from one parent that has imported everything already.

The crash test kills an agent process many times; starting Python and importing numpy, scipy,
pydantic and paho for every restart would dominate its run time. This parent stays
single-threaded and forks a fresh child per request, which runs the real command line entry
point. Protocol on stdin/stdout, one JSON value per line:
``{"run": [argv...]}`` -> the child's pid; ``{"wait": pid}`` -> its exit status.
"""

from __future__ import annotations

import json
import os
import sys

import edge_agent.agent
import edge_agent.commands.edge
import edge_agent.extractor
import edge_agent.simulator
import wellspan.cli

__all__: list[str] = []

_PRELOADED = (
    edge_agent.agent,
    edge_agent.commands.edge,
    edge_agent.extractor,
    edge_agent.simulator,
)


def main() -> None:
    for line in sys.stdin:
        request = json.loads(line)
        if "run" in request:
            pid = os.fork()
            if pid == 0:
                devnull = os.open(os.devnull, os.O_WRONLY)
                os.dup2(devnull, 1)
                try:
                    code = wellspan.cli.main(request["run"])
                except BaseException:
                    code = 99
                os._exit(code)
            reply: object = pid
        else:
            _, status = os.waitpid(int(request["wait"]), 0)
            reply = status
        sys.stdout.write(json.dumps(reply) + "\n")
        sys.stdout.flush()


if __name__ == "__main__":
    main()
