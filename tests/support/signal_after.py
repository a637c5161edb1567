"""Run the `sweep` command line, and signal it after its N-th completed block: a fault at a known moment.

    python tests/support/signal_after.py N SIGNAL run SPEC --store S ...

SIGKILL and SIGINT go to the whole process group, as a batch system's kill or a terminal's
Ctrl-C do (start the command in a session of its own); SIGSTOP stops this process only. The
moment is counted in blocks marked done in the completion record, so a test that interrupts a
sweep never races the sweep's end, however fast the machine.
"""

from __future__ import annotations

import os
import signal
import sys


def main() -> None:
    count, name, *argv = sys.argv[1:]
    after, sig = int(count), getattr(signal, name)
    from sweep.execute import session
    seen = [0]

    def arm(cls) -> None:
        mark = cls.mark

        def counted(self, *args, **kwargs):
            mark(self, *args, **kwargs)
            seen[0] += 1
            if seen[0] == after:
                if sig == signal.SIGSTOP:
                    os.kill(os.getpid(), sig)
                else:
                    os.killpg(os.getpgrp(), sig)

        cls.mark = counted

    for cls in (session.DoneRecord, session.ShardRecord):
        arm(cls)
    sys.argv = ["sweep", *argv]
    from sweep.cli import main as cli

    cli()


if __name__ == "__main__":
    main()
