"""Progress bars for the long steps (emcee chains, chunked mocks, batches): tqdm on standard error,
shown when ``progress`` is True, or -- with ``progress=None``, the default everywhere -- only when
standard error is a terminal, so logs, pipes and tests stay clean (common practice of command-line tools)."""
from __future__ import annotations

import sys


def progress_bar(total: int, progress: bool | None, desc: str, unit: str, *, leave: bool = True):
    """A tqdm bar over ``total`` ``unit``s, or None when no bar is to be shown (see the module docstring);
    ``leave=False`` clears it when closed (for runs that may stop before ``total``, as a converging chain)."""
    show = sys.stderr.isatty() if progress is None else bool(progress)
    if not show or total <= 0:
        return None
    from tqdm.auto import tqdm

    return tqdm(total=int(total), desc=desc, unit=unit, file=sys.stderr, dynamic_ncols=True, leave=leave)
