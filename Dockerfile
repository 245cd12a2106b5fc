# veramp service image: build wheels in one stage, run as a non-root user in a slim second stage.
# Dependencies are pinned by deploy/requirements.lock (regenerate: see deploy/OPERATIONS.md).

FROM python:3.11-slim-bookworm AS build
WORKDIR /src
# compilers for packages without a wheel for this platform
RUN apt-get update \
    && apt-get install -y --no-install-recommends build-essential=12.9 \
    && rm -rf /var/lib/apt/lists/*
COPY deploy/requirements.lock ./requirements.lock
RUN pip wheel --no-cache-dir --wheel-dir /wheels -r requirements.lock
COPY pyproject.toml README.md ./
COPY contraction ./contraction
COPY service ./service
RUN pip wheel --no-cache-dir --no-deps --wheel-dir /wheels .

FROM python:3.11-slim-bookworm AS run
ENV PYTHONDONTWRITEBYTECODE=1 \
    PYTHONUNBUFFERED=1 \
    VERAMP_DATA_DIR=/data \
    VERAMP_HOST=0.0.0.0 \
    VERAMP_PORT=8350
RUN groupadd --system --gid 10001 veramp \
    && useradd --system --uid 10001 --gid veramp --home-dir /data --shell /usr/sbin/nologin veramp \
    && mkdir -p /data && chown veramp:veramp /data
COPY --from=build /wheels /wheels
COPY deploy/requirements.lock /tmp/requirements.lock
RUN pip install --no-cache-dir --no-index --find-links /wheels -r /tmp/requirements.lock veramp==0.1.0 \
    && rm -rf /wheels /tmp/requirements.lock
USER 10001:10001
WORKDIR /data
VOLUME ["/data"]
EXPOSE 8350
HEALTHCHECK --interval=30s --timeout=5s --start-period=60s --retries=3 \
    CMD ["veramp", "health"]
ENTRYPOINT ["veramp"]
CMD ["serve"]
