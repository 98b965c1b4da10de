"""Micrographs: attach (through the content-addressed raw store), originals, cached thumbnails."""

from __future__ import annotations

import io

from flask import Blueprint, Response, abort, current_app, flash, redirect, render_template, request, send_file, url_for

from magvault.errors import MagvaultError

from ..forms import ImageForm, clean, show_error
from ..staging import display_name
from .common import vault

bp = Blueprint("images", __name__)

IMAGE_ID = "<int(min=1, max=2147483647):image_id>"
THUMB_SIZES = (240, 480, 960)


@bp.post("/images")
def attach():
    form = ImageForm()
    specimen, run = clean(form.specimen.data), clean(form.run.data)
    upload = request.files.get("file")
    if form.validate_on_submit():
        if upload is None or not upload.filename:
            form.file.errors = ["image: choose a PNG, JPEG or TIFF file"]
        else:
            data = upload.read()
            try:
                image_id = vault().attach_image(data=data, name=display_name(upload.filename, "image"),
                                                specimen=specimen, run=run,
                                                pixel_size=clean(form.pixel_size.data),
                                                caption=clean(form.caption.data))
            except MagvaultError as exc:
                show_error(form, exc, {"pixel_size": "pixel_size", "image": "file"})
            else:
                flash(f"Image {image_id} attached ({display_name(upload.filename)}).", "ok")
                if run:
                    return redirect(url_for("runs.show", run_id=int(run), _anchor="images"))
                return redirect(url_for("specimens.show", code=specimen, _anchor="images"))
    # Back to the page the form came from, with the errors beside the fields.
    if run and run.isdigit():
        from .runs import run_context

        return render_template("run.html", **run_context(int(run), image_form=form)), 422
    if specimen:
        from .specimens import specimen_context

        return render_template("specimen.html", **specimen_context(specimen, image_form=form)), 422
    abort(400, description="say what the image shows: a specimen or a run")


@bp.get(f"/image/{IMAGE_ID}/original")
def original(image_id: int):
    """The bytes exactly as attached, under their original name."""
    doc, data = vault().image(image_id)
    return send_file(io.BytesIO(data), mimetype=doc["media_type"], as_attachment=True,
                     download_name=doc["name"] or f"image-{image_id}", etag=doc["sha256"], max_age=0)


@bp.get(f"/image/{IMAGE_ID}/thumbnail")
def thumbnail(image_id: int):
    """A PNG for the browser (derived, cached by the original's SHA-256; never stored in its place)."""
    size_text = request.args.get("size", "480")
    if size_text not in {str(s) for s in THUMB_SIZES}:
        abort(400, description=f"size: expected one of {', '.join(map(str, THUMB_SIZES))} (pixels), "
                               f"got {size_text!r}")
    size = int(size_text)
    v = vault()
    cache = current_app.extensions["magvault.thumbs"]
    sha = cache.sha_of(image_id, lambda i: v.image(i)[0]["sha256"])
    etag = f"{sha}-{size}"
    if etag in request.if_none_match:
        return Response(status=304, headers={"ETag": f'"{etag}"'})
    try:
        png = cache.get(sha, size, lambda: v.thumbnail(image_id, max_px=size))
    except (OSError, ValueError) as exc:
        # Pillow could read the header at attach time but not the pixels now.
        abort(422, description=f"image {image_id}: no preview can be drawn ({exc}); download the original")
    response = Response(png, mimetype="image/png")
    response.headers["ETag"] = f'"{etag}"'
    response.headers["Cache-Control"] = "private, max-age=86400"
    return response
