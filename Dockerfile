# One image for web, worker and beat (see docker-compose.yml).
FROM python:3.11-slim

ENV PYTHONDONTWRITEBYTECODE=1 \
    PYTHONUNBUFFERED=1 \
    PIP_NO_CACHE_DIR=1 \
    PIP_DISABLE_PIP_VERSION_CHECK=1

WORKDIR /app

# Every dependency ships as a wheel (psycopg[binary] brings its own libpq), so no compiler is needed.
# .dockerignore keeps the virtualenv, local data, tests and git history out of the image.
COPY . .
RUN pip install .

# The settings find templates and var/ next to the source tree, so run from /app, not from the
# installed copy.
ENV PYTHONPATH=/app \
    DEBUG=0 \
    STATIC_ROOT=/app/var/static \
    MEDIA_ROOT=/app/var/media

RUN useradd --create-home --uid 1000 beamledger \
    && mkdir -p /app/var/static /app/var/media \
    && chown -R beamledger:beamledger /app/var
USER beamledger

# collectstatic needs a key to import the settings; this one exists only during the build.
RUN SECRET_KEY=collectstatic-only-build-key-0123456789abcdef python manage.py collectstatic --noinput

EXPOSE 8000
CMD ["gunicorn", "facility.wsgi", "--bind", "0.0.0.0:8000", "--workers", "3", "--access-logfile", "-"]
