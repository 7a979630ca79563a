# riskfit container image: build the wheel in one stage, install only the wheel in the next.
#   docker build -t riskfit:0.1.0 .
#   docker run -p 127.0.0.1:8000:8000 -v riskfit-data:/data riskfit:0.1.0
# The store defaults to an SQLite file on the /data volume; set RISKFIT_DATABASE_URL to a
# postgresql+psycopg:// URL to use PostgreSQL instead (see deploy/compose.yaml).
# Behind a TLS proxy or ingress (deploy/README.md, "Behind a reverse proxy"): set
# RISKFIT_TRUSTED_PROXIES to the proxy's address or CIDR range (the container binds 0.0.0.0,
# so the default 127.0.0.1 is never the proxy) and RISKFIT_COOKIE_SECURE=always.
# /metrics needs an API key (RISKFIT_METRICS_ACCESS=key); a stalled request body is cut after
# RISKFIT_BODY_TIMEOUT_SECONDS, an idle keep-alive connection after RISKFIT_KEEP_ALIVE_SECONDS.

FROM python:3.11-slim AS build
ENV PIP_NO_CACHE_DIR=1 PIP_DISABLE_PIP_VERSION_CHECK=1
WORKDIR /src
COPY pyproject.toml README.md ./
COPY service ./service
COPY models_store ./models_store
RUN python -m pip wheel --no-deps --wheel-dir /wheels .

FROM python:3.11-slim
ENV PYTHONDONTWRITEBYTECODE=1 \
    PYTHONUNBUFFERED=1 \
    PIP_NO_CACHE_DIR=1 \
    PIP_DISABLE_PIP_VERSION_CHECK=1 \
    MPLCONFIGDIR=/tmp/matplotlib \
    RISKFIT_DATABASE_URL=sqlite:////data/riskfit.db \
    RISKFIT_TRUSTED_PROXIES=127.0.0.1,::1 \
    RISKFIT_COOKIE_SECURE=auto \
    RISKFIT_METRICS_ACCESS=key \
    RISKFIT_BODY_TIMEOUT_SECONDS=30 \
    RISKFIT_KEEP_ALIVE_SECONDS=5
COPY --from=build /wheels /wheels
# the postgres extra brings the psycopg driver, so one image serves SQLite and PostgreSQL
RUN sh -c 'python -m pip install "$(ls /wheels/riskfit-*.whl)[postgres]"' \
    && rm -rf /wheels \
    && groupadd --system --gid 10001 riskfit \
    && useradd --system --uid 10001 --gid riskfit --home-dir /data --no-create-home riskfit \
    && mkdir -p /data \
    && chown riskfit:riskfit /data
USER riskfit:riskfit
WORKDIR /data
VOLUME /data
EXPOSE 8000
HEALTHCHECK --interval=30s --timeout=5s --start-period=30s --retries=3 \
    CMD ["python", "-c", "import sys, urllib.request; r = urllib.request.urlopen('http://127.0.0.1:8000/healthz', timeout=4); sys.exit(0 if r.status == 200 else 1)"]
CMD ["riskfit", "serve", "--host", "0.0.0.0", "--port", "8000"]
