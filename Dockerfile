# The lcstore image of docker-compose.yml (API under gunicorn, task worker, migrations).
FROM python:3.11-slim
ENV PYTHONDONTWRITEBYTECODE=1 \
    PYTHONUNBUFFERED=1 \
    DJANGO_SETTINGS_MODULE=lcstore.settings
WORKDIR /app
COPY requirements.txt .
RUN pip install --no-cache-dir -r requirements.txt
# Only what the service runs (no local virtual environments, databases or caches).
COPY manage.py ./
COPY lcstore ./lcstore
COPY api ./api
COPY web ./web
COPY fixtures ./fixtures
# Static files for whitenoise (admin, browsable API, web pages); settings need no
# environment for this (the demo SQLite settings are never connected to).
RUN python manage.py collectstatic --noinput -v 0
RUN useradd --system --uid 10001 --home-dir /app lcstore && mkdir -p /app/var \
    && chown lcstore /app/var
USER lcstore
EXPOSE 8000
CMD ["gunicorn", "lcstore.wsgi:application", "--bind", "0.0.0.0:8000", "--workers", "2"]
