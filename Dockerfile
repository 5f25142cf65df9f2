# Image for the dyadcast scheduler (and, optionally, Dask workers): the package, its SQL and Prefect.
# Built by `docker compose build`; see deploy/README.md.
FROM python:3.11-slim

ENV PYTHONDONTWRITEBYTECODE=1 \
    PYTHONUNBUFFERED=1 \
    PIP_NO_CACHE_DIR=1 \
    PIP_DISABLE_PIP_VERSION_CHECK=1 \
    DYADCAST_SQL_DIR=/opt/dyadcast/sql \
    DYADCAST_WORKSPACE=/workspace

# libgomp1: OpenMP runtime that LightGBM's wheels link against; not in the slim image.
RUN apt-get update \
    && apt-get install -y --no-install-recommends libgomp1 \
    && rm -rf /var/lib/apt/lists/*

WORKDIR /opt/dyadcast
COPY pyproject.toml README.md ./
COPY src ./src
COPY flows ./flows
# `pip install .` does not ship sql/; DYADCAST_SQL_DIR (above) points dyadcast.warehouse at this copy.
COPY sql ./sql
RUN pip install ".[dask]"

RUN useradd --create-home --uid 10001 dyadcast \
    && mkdir -p /workspace \
    && chown dyadcast:dyadcast /workspace
USER dyadcast
VOLUME ["/workspace"]

ENTRYPOINT ["dyadcast"]
CMD ["schedule"]
