"""SIGTERM handled as Ctrl-C is: the run stops where it is, in one line, leaving no partial file.

:func:`terminate_on_sigterm` makes SIGTERM raise :class:`Terminated` for the
length of a ``with`` block; the command catches it, prints one line and exits
with :data:`EXIT_TERMINATED`. Outputs are written to temporary files renamed
into place only when complete (:func:`conditioning.io.outputs.atomic_output`),
whose cleanup runs on any exception, this one included.
"""

from __future__ import annotations

import signal
from contextlib import contextmanager
from typing import Iterator

#: 128 + SIGTERM (15), the shell's convention for a run ended by that signal.
EXIT_TERMINATED = 128 + int(signal.SIGTERM)


class Terminated(BaseException):
    """Raised by the SIGTERM handler; a BaseException, as KeyboardInterrupt is, so that no
    ``except Exception`` in the stages swallows it."""


def _raise_terminated(signum, frame):  # noqa: ARG001 - signal API
    raise Terminated()


@contextmanager
def terminate_on_sigterm() -> Iterator[None]:
    """SIGTERM raises :class:`Terminated` inside the block; the earlier handler is restored after.
    Outside the main thread (where Python cannot set a handler) nothing changes."""
    try:
        previous = signal.signal(signal.SIGTERM, _raise_terminated)
    except ValueError:
        yield
        return
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous if previous is not None else signal.SIG_DFL)
