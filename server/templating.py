"""The Jinja2 environment of the pages: templates from web/templates, shared filters."""

from __future__ import annotations

from fastapi.templating import Jinja2Templates

from server.config import WEB_DIR
from server.static_files import static_url
from server.units import format_quantity

templates = Jinja2Templates(directory=str(WEB_DIR / "templates"))
templates.env.filters["eng"] = lambda value, kind, digits=3: format_quantity(value, kind, digits)
templates.env.globals["static_url"] = static_url
templates.env.filters["when"] = lambda dt: dt.strftime("%Y-%m-%d %H:%M UTC") if dt else "never"
