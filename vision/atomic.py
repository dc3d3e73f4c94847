"""Write files so that a reader never sees half of one: write a temporary sibling, then rename.

Used by every stage for results, so a crash or a bad input never leaves a half-written file.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path
from typing import Iterator


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike, suffix: str | None = None) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; on success rename it to ``path``, on error delete it.

    The temporary name keeps ``path``'s suffix (or ``suffix``) so writers that pick a format from
    the extension still work.
    """
    target = Path(path)
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(
        prefix=f".{target.stem}.", suffix=suffix if suffix is not None else target.suffix, dir=target.parent
    )
    os.close(fd)
    tmp_path = Path(tmp)
    try:
        yield tmp_path
        os.replace(tmp_path, target)
    except BaseException:
        tmp_path.unlink(missing_ok=True)
        raise


def write_text_atomic(path: str | os.PathLike, text: str) -> None:
    """Write ``text`` (UTF-8) to ``path`` atomically."""
    with atomic_path(path) as tmp:
        tmp.write_text(text, encoding="utf-8")


def write_image_atomic(path: str | os.PathLike, image) -> None:
    """Write an (H, W, 3) uint8 BGR image (PNG or JPEG by the name's suffix) atomically;
    ValueError naming the file when OpenCV cannot write it."""
    import cv2

    with atomic_path(path) as tmp:
        if not cv2.imwrite(str(tmp), image):
            raise ValueError(f"could not write the image {path}; check the folder and the suffix (.png or .jpg)")
