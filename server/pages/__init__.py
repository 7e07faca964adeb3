"""Server-rendered pages (Jinja2) over the same service functions as the API."""
