"""Micrographs attached to specimens or runs: originals in the raw store, thumbnails derived."""

from __future__ import annotations

import io
from typing import Any

import numpy as np
from sqlalchemy import select
from sqlalchemy.orm import Session

from ..errors import InvalidValue, NotFound
from ..store.models import Image, RawFile
from . import events, registry
from . import runs as run_service

FORMATS = {"PNG": "image/png", "JPEG": "image/jpeg", "TIFF": "image/tiff"}


def inspect_image(data: bytes, name: str) -> tuple[str, int, int]:
    """(media type, width, height); refuses anything but PNG, JPEG and TIFF."""
    from PIL import Image as PILImage, UnidentifiedImageError

    try:
        with PILImage.open(io.BytesIO(data)) as img:
            fmt, (w, h) = img.format, img.size
            img.verify()
    except (UnidentifiedImageError, OSError, ValueError) as exc:
        raise InvalidValue(f"{name}: not a readable image ({exc}); attach PNG, JPEG or TIFF", field="file") from None
    if fmt not in FORMATS:
        raise InvalidValue(f"{name}: {fmt} images are not accepted; attach PNG, JPEG or TIFF", field="file")
    return FORMATS[fmt], w, h


def attach(session: Session, data: bytes, name: str, *, specimen: str | None, run: int | None,
           pixel_size_m: float | None, caption: str | None) -> Image:
    if not specimen and not run:
        raise InvalidValue("say what the image shows: a specimen code or a run id", field="specimen")
    media, w, h = inspect_image(data, name)
    spec = registry.get_specimen(session, specimen) if specimen else None
    run_row = run_service.get_run(session, run) if run else None
    if spec is None and run_row is not None:
        spec = run_row.specimen
    raw = run_service.store_raw(session, data, name, media)
    image = Image(specimen_id=spec.id if spec else None, run_id=run_row.id if run_row else None,
                  raw_file_id=raw.id, source_name=name[:255], pixel_size_m=pixel_size_m, width_px=w, height_px=h,
                  caption=caption)
    session.add(image)
    session.flush()
    events.record(session, "create", "image", image.id, specimen_code=spec.code if spec else None,
                  after={"name": name, "sha256": raw.sha256, "pixel_size_m": pixel_size_m, "caption": caption,
                         "run": run_row.id if run_row else None, "width_px": w, "height_px": h})
    return image


def describe(session: Session, image: Image) -> dict[str, Any]:
    raw = session.get(RawFile, image.raw_file_id)
    return {"id": image.id, "specimen_id": image.specimen_id, "run": image.run_id, "name": image.source_name,
            "sha256": raw.sha256, "media_type": raw.media_type, "pixel_size_m": image.pixel_size_m,
            "width_px": image.width_px, "height_px": image.height_px, "caption": image.caption}


def get(session: Session, image_id: int) -> Image:
    image = session.get(Image, int(image_id))
    if image is None:
        raise NotFound(f"image {image_id} not found", field="image")
    return image


def list_for(session: Session, *, specimen_id: int | None = None, run_id: int | None = None) -> list[Image]:
    q = select(Image).order_by(Image.id)
    if specimen_id is not None:
        q = q.where(Image.specimen_id == specimen_id)
    if run_id is not None:
        q = q.where(Image.run_id == run_id)
    return list(session.scalars(q))


def thumbnail_png(data: bytes, max_px: int = 480) -> bytes:
    """A browser-displayable PNG no larger than ``max_px``; 16-bit images are stretched to 8 bits."""
    from PIL import Image as PILImage

    with PILImage.open(io.BytesIO(data)) as img:
        img.load()
        if img.mode in ("I;16", "I;16B", "I;16L", "I", "F"):
            arr = np.asarray(img, dtype=np.float64)
            lo, hi = np.nanpercentile(arr, [0.5, 99.5]) if arr.size else (0.0, 1.0)
            scaled = np.clip((arr - lo) / ((hi - lo) or 1.0), 0, 1) * 255
            img = PILImage.fromarray(scaled.astype(np.uint8), mode="L")
        elif img.mode not in ("L", "RGB", "RGBA"):
            img = img.convert("RGB")
        img.thumbnail((max_px, max_px))
        out = io.BytesIO()
        img.save(out, format="PNG")
        return out.getvalue()
