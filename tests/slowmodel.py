"""Test models that wrap a real model and sleep, fail or kill their worker process.

Worker processes unpickle these by value (registered with cloudpickle below), so they need not
import this file. Run as a script, it is the ``sweep`` command with every model slowed down:
``python tests/slowmodel.py DELAY_S run SPEC ...``.
"""

from __future__ import annotations

import os
import signal
import sys
import time
from pathlib import Path

import cloudpickle


class Wrapped:
    """Delegates ``outputs`` and ``coords`` to the wrapped model."""

    def __init__(self, inner):
        self.inner = inner

    def outputs(self):
        return self.inner.outputs()

    def coords(self):
        return self.inner.coords()


class SlowModel(Wrapped):
    """Sleeps ``delay_s`` seconds in every block."""

    def __init__(self, inner, delay_s):
        super().__init__(inner)
        self.delay_s = float(delay_s)

    def evaluate(self, block):
        time.sleep(self.delay_s)
        return self.inner.evaluate(block)


class FailingModel(Wrapped):
    """Raises in every evaluation of one block, numbering its failures in a file."""

    def __init__(self, inner, bad_block, counter: Path):
        super().__init__(inner)
        self.bad_block = bad_block
        self.counter = str(counter)

    def evaluate(self, block):
        if block.index == self.bad_block:
            with open(self.counter, "a") as stream:
                stream.write("x")
            raise ValueError(f"failure number {os.path.getsize(self.counter)} of block {block.index}")
        return self.inner.evaluate(block)


class KillOnceModel(Wrapped):
    """Kills its own worker process with SIGKILL the first time it sees one block."""

    def __init__(self, inner, block_index, marker: Path, delay_s=0.0):
        super().__init__(inner)
        self.block_index = block_index
        self.marker = str(marker)
        self.delay_s = delay_s

    def evaluate(self, block):
        time.sleep(self.delay_s)
        if block.index == self.block_index and not os.path.exists(self.marker):
            Path(self.marker).write_text(str(os.getpid()))
            os.kill(os.getpid(), signal.SIGKILL)
        return self.inner.evaluate(block)


cloudpickle.register_pickle_by_value(sys.modules[__name__])


def main(argv):
    """``sweep`` with every model wrapped in :class:`SlowModel` (``argv[0]`` is the delay [s])."""
    from sweep.cli import main as sweep_main
    from sweep.spec import Spec

    delay_s, rest = float(argv[0]), argv[1:]
    build_model = Spec.build_model
    Spec.build_model = lambda self: SlowModel(build_model(self), delay_s)
    return sweep_main(rest)


if __name__ == "__main__":
    sys.path.insert(0, str(Path(__file__).resolve().parent))
    import slowmodel  # so pickles name the importable module, not __main__

    raise SystemExit(slowmodel.main(sys.argv[1:]))
