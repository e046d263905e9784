"""The interactive API page (``/docs``), served without the internet.

Its script, style sheet and icon come from the ``swagger-ui-bundle-v2`` package
(import name ``swagger_ui_bundle``, the files of Swagger UI 5, which reads the
OpenAPI 3.1 schema FastAPI writes), served by this service under ``/docs/assets/``.
Only those three files are served (not the package's source maps or sample pages),
and the online spec validator is switched off, so the page makes no request to any
other host. Without the package, ``/docs`` says how to install it and the schema
stays at ``/openapi.json``.
"""

from __future__ import annotations

import re
from pathlib import Path

from fastapi import APIRouter, Request
from fastapi.openapi.docs import get_swagger_ui_html
from fastapi.responses import FileResponse, HTMLResponse, Response

from service.errors import NotFound

router = APIRouter(include_in_schema=False)

ASSETS = {
    "swagger-ui-bundle.js": "text/javascript; charset=utf-8",
    "swagger-ui.css": "text/css; charset=utf-8",
    "favicon-32x32.png": "image/png",
}
PREFIX = "/docs/assets/"


def assets_dir() -> Path | None:
    """Where the installed package keeps Swagger UI's files (None: not installed, or
    Swagger UI older than 5, which cannot read an OpenAPI 3.1 schema; the package
    ``swagger-ui-bundle`` of the same import name ships version 4)."""
    try:
        from swagger_ui_bundle import swagger_ui_path
    except ImportError:
        return None
    path = Path(str(swagger_ui_path))
    major = re.match(r"swagger-ui-(\d+)\.", path.name)
    if major is None or int(major.group(1)) < 5:
        return None
    return path if all((path / name).is_file() for name in ASSETS) else None


@router.get("/docs")
def docs(request: Request) -> Response:
    if assets_dir() is None:
        return HTMLResponse(
            "<!DOCTYPE html><html lang=en><meta charset=utf-8><title>seqtest API</title>"
            "<p>The interactive API page needs the package <code>swagger-ui-bundle-v2</code> "
            "(Swagger UI 5 or later; <code>pip install 'seqtest[service]'</code>). The schema "
            "is at "
            "<a href=/openapi.json>/openapi.json</a>.</p></html>", status_code=503)
    return get_swagger_ui_html(
        openapi_url=request.app.openapi_url or "/openapi.json",
        title=f"{request.app.title} - API",
        swagger_js_url=PREFIX + "swagger-ui-bundle.js",
        swagger_css_url=PREFIX + "swagger-ui.css",
        swagger_favicon_url=PREFIX + "favicon-32x32.png",
        swagger_ui_parameters={"validatorUrl": None},  # no request to an online validator
    )


@router.get(PREFIX + "{name}")
def asset(name: str) -> Response:
    folder = assets_dir()
    if name not in ASSETS or folder is None:
        raise NotFound(f"There is no asset {name!r} of the API page.")
    return FileResponse(folder / name, media_type=ASSETS[name],
                        headers={"Cache-Control": "public, max-age=86400"})
