# wakeledger image: slim Python, dependencies pinned by constraints.txt (kept in the repository;
# regenerate with scripts/freeze_constraints.py), running as an unprivileged user.
#   docker build -t wakeledger .
#   docker run --rm -p 127.0.0.1:8000:8000 -e DATABASE_URL=... wakeledger
# Advisory tool: it does not replace machine protection, interlocks, radiation safety or the
# facility's own procedures.
FROM python:3.11-slim

ENV PYTHONDONTWRITEBYTECODE=1 \
    PYTHONUNBUFFERED=1 \
    PIP_DISABLE_PIP_VERSION_CHECK=1 \
    PIP_NO_CACHE_DIR=1

RUN groupadd --system wakeledger \
 && useradd --system --gid wakeledger --home-dir /srv/wakeledger --create-home --shell /usr/sbin/nologin wakeledger

WORKDIR /srv/wakeledger

# The pinned dependencies first: this layer is rebuilt only when constraints.txt changes.
COPY constraints.txt ./
RUN pip install --requirement constraints.txt

# Then wakeledger itself, built with the pinned setuptools and wheel (nothing else is fetched).
COPY pyproject.toml README.md LICENSE ./
COPY app ./app
COPY model ./model
COPY migrations ./migrations
COPY seed_demo ./seed_demo
RUN pip install --no-deps --no-build-isolation . \
 && rm -rf build ./*.egg-info

USER wakeledger
# SQLite (when DATABASE_URL is not set) lives in the data volume, writable by the user.
ENV DATABASE_URL=sqlite:////srv/wakeledger/data/wakeledger.db
RUN mkdir -p /srv/wakeledger/data
VOLUME ["/srv/wakeledger/data"]

EXPOSE 8000
HEALTHCHECK --interval=10s --timeout=5s --start-period=30s --retries=6 \
  CMD ["python", "-c", "import sys, urllib.request; sys.exit(0 if urllib.request.urlopen('http://127.0.0.1:8000/healthz', timeout=3).status == 200 else 1)"]

# Applies the migrations, then serves (and runs one job worker beside the server).
CMD ["wakeledger", "serve", "--host", "0.0.0.0", "--port", "8000"]
