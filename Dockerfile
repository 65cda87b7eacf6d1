# The Spatline service image: the API, migrations applied at start.
FROM python:3.11-slim

ENV PYTHONDONTWRITEBYTECODE=1 \
    PYTHONUNBUFFERED=1 \
    PIP_NO_CACHE_DIR=1 \
    PIP_DISABLE_PIP_VERSION_CHECK=1

# A plain (non-editable) install: the wheel carries the migrations, templates, static files
# and chemistry data, so the source is built in a scratch directory and thrown away.
WORKDIR /tmp/spatline-src
COPY pyproject.toml setup.py README.md ./
COPY app ./app
COPY chemistry ./chemistry
COPY demo ./demo
COPY migrations ./migrations
# gcc builds the compiled chemistry kernel (chemistry/_kernel.c) and is removed again after.
RUN apt-get update \
    && apt-get install -y --no-install-recommends gcc libc6-dev \
    && pip install . \
    && apt-get purge -y --auto-remove gcc libc6-dev \
    && rm -rf /var/lib/apt/lists/* \
    && cd / \
    && python -c "from chemistry import kernel; assert kernel.available(), 'no kernel built'" \
    && rm -rf /tmp/spatline-src \
    && useradd --create-home --uid 10001 spatline \
    && mkdir -p /srv/spatline/var \
    && chown spatline /srv/spatline/var

# The default SQLite file (var/spatline.db) is relative to the working directory.
WORKDIR /srv/spatline
USER spatline
EXPOSE 8000

# Migrations are the only way tables are made: apply them, then serve.
CMD ["sh", "-c", "spatline migrate && spatline serve --host 0.0.0.0 --port 8000"]
