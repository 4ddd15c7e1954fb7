"""WSGI entry point (gunicorn lcstore.wsgi)."""

import os
from importlib import import_module

from django.core.wsgi import get_wsgi_application

os.environ.setdefault("DJANGO_SETTINGS_MODULE", "lcstore.settings")
application = get_wsgi_application()

# Work Django and astropy would otherwise do in each worker's first request, done at start:
# Django imports the URLconf, and with it every view and scipy.stats, on the first request
# (1.1 s of it, cProfile); astropy parses its time tables on the first upload.
from django.conf import settings  # noqa: E402

from lcstore.science.times import tables_preload  # noqa: E402

import_module(settings.ROOT_URLCONF)
tables_preload()
