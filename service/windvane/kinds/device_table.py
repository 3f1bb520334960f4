"""A table of device models and their screen sizes, for requests that carry no screen size.

CSV with the header ``model,os,w,h,pxratio``: w and h in physical pixels and pxratio in
physical pixels per device-independent pixel, as in the OpenRTB 2.5 Device object.
"""

from __future__ import annotations

import csv
import math
from pathlib import Path


class DeviceTableError(ValueError):
    """The device table cannot be read; the message names the line."""


def load_device_table(path: Path) -> dict[str, tuple[float, float]]:
    """Model -> (width, height) of the screen in device-independent pixels."""
    try:
        handle = path.open(newline="", encoding="utf-8")
    except OSError as exc:
        raise DeviceTableError(f"cannot read {path}: {exc.strerror}") from None
    table: dict[str, tuple[float, float]] = {}
    with handle:
        reader = csv.DictReader(handle)
        missing = {"model", "w", "h", "pxratio"} - set(reader.fieldnames or ())
        if missing:
            raise DeviceTableError(f"{path}: header lacks {', '.join(sorted(missing))}")
        for row in reader:
            line = reader.line_num
            try:
                w, h, ratio = (float(row[name]) for name in ("w", "h", "pxratio"))
            except (TypeError, ValueError):
                raise DeviceTableError(f"{path}:{line}: w, h and pxratio must be numbers") from None
            if not all(math.isfinite(x) and x > 0 for x in (w, h, ratio)):
                raise DeviceTableError(f"{path}:{line}: w, h and pxratio must be positive")
            table[row["model"]] = (w / ratio, h / ratio)
    return table
