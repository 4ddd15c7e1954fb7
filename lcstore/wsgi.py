"""WSGI entry point (gunicorn lcstore.wsgi)."""

import os

from django.core.wsgi import get_wsgi_application

os.environ.setdefault("DJANGO_SETTINGS_MODULE", "lcstore.settings")
application = get_wsgi_application()

# astropy's time tables are parsed once per worker at start, not by its first upload.
from lcstore.science.times import tables_preload  # noqa: E402

tables_preload()
