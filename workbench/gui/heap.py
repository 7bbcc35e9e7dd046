"""Short garbage-collector passes while the window runs.

CPython's cyclic garbage collector walks every object it tracks in a full pass, on the
thread whose allocation set it off, holding the interpreter meanwhile: the window's event
loop waits for it. With Qt, pyqtgraph, pandas and scikit-learn loaded and a table open,
the window tracks about 185,000 objects and a full pass took 140 ms (measured on the
sample kiln table; ``workbench bench --gui`` prints it beside the figure below). Full
passes are rare but came during sweeps, where they were the longest stalls left.

:func:`freeze` calls :func:`gc.freeze` (Python's documented way to exclude the objects
alive now from every later collection; they move to a permanent generation): a full
pass then walks only what was made since, and took well under a millisecond. The window
freezes what it holds after its start-up imports, when a table is loaded and as a sweep
starts. A frozen object is still freed when its last reference goes (reference
counting); only garbage already caught in a reference cycle at that moment is kept for
good, and there is little of it: 0 to 20 objects at each freeze of a window that loaded
a table and ran four sweeps (a collection run just before each freeze, to count them),
its frozen objects and memory the same after the fourth sweep as after the first.
"""

from __future__ import annotations

import gc


def freeze() -> int:
    """Move every object the collector tracks now to its permanent generation.

    Returns
    -------
    int
        How many objects are frozen (:func:`gc.get_freeze_count`).
    """
    gc.freeze()
    return gc.get_freeze_count()
