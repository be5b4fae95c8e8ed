"""Atomic writes of cache files: a temporary ``<name>.<pid>.part`` beside the target, then a
rename, so that a reader never sees a half-written file and a killed writer leaves no entry.

Units: none.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

import numpy as np


def write_npz(path: Any, arrays: dict[str, Any], compressed: bool = True) -> None:
    """Write ``arrays`` to the .npz file ``path`` atomically (its folder is created).

    The temporary file is removed if the write fails; the target is replaced only by a
    complete file.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f"{path.name}.{os.getpid()}.part")
    save = np.savez_compressed if compressed else np.savez
    try:
        with open(tmp, "wb") as fh:
            save(fh, **arrays)
        os.replace(tmp, path)
    finally:
        if os.path.exists(tmp):
            os.remove(tmp)
