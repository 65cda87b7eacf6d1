# The Spatline service image: the API, migrations applied at start.
FROM python:3.11-slim

# PYTHONPATH: the app is imported from this source tree, so that alembic.ini and every
# file of migrations/ (versions/ is not a Python package, so not installed) sit beside it.
ENV PYTHONDONTWRITEBYTECODE=1 \
    PYTHONUNBUFFERED=1 \
    PIP_NO_CACHE_DIR=1 \
    PIP_DISABLE_PIP_VERSION_CHECK=1 \
    PYTHONPATH=/srv/spatline

WORKDIR /srv/spatline

COPY pyproject.toml README.md alembic.ini ./
COPY app ./app
COPY chemistry ./chemistry
COPY demo ./demo
COPY migrations ./migrations
RUN pip install . \
    && useradd --create-home --uid 10001 spatline \
    && mkdir -p var \
    && chown spatline var

USER spatline
EXPOSE 8000

# Migrations are the only way tables are made: apply them, then serve.
CMD ["sh", "-c", "spatline migrate && spatline serve --host 0.0.0.0 --port 8000"]
