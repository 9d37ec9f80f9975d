# Plumbline service image: the same install and start commands as the README's Quickstart.
FROM python:3.11-slim

ENV PYTHONDONTWRITEBYTECODE=1 \
    PYTHONUNBUFFERED=1 \
    PIP_NO_CACHE_DIR=1 \
    PIP_DISABLE_PIP_VERSION_CHECK=1

WORKDIR /app

# Dependencies in their own layer: only pyproject.toml is needed to resolve them, so this layer
# is rebuilt only when the dependencies change.
COPY pyproject.toml README.md ./
RUN mkdir -p service && touch service/__init__.py \
    && pip install . \
    && pip uninstall -y plumbline \
    && rm -rf service build

# The application itself.
COPY service ./service
COPY openapi_examples ./openapi_examples
RUN pip install --no-deps . && rm -rf build

# A non-root user owns the data folder; the embedded default database lives there.
RUN useradd --system --uid 10001 --home-dir /data --create-home plumbline
USER plumbline
WORKDIR /data

# The database URL comes from the environment (default: an SQLite file in /data). Set
# PLUMBLINE_DATABASE_URL=postgresql+psycopg://... for production and PLUMBLINE_ADMIN_TOKEN
# for a known admin token.
ENV PLUMBLINE_DATABASE_URL=sqlite:////data/plumbline.db \
    PLUMBLINE_EXAMPLES_DIR=/app/openapi_examples
VOLUME ["/data"]
EXPOSE 8000

HEALTHCHECK --interval=30s --timeout=5s --start-period=20s --retries=3 \
    CMD ["python", "-c", "import urllib.request, sys; sys.exit(0 if urllib.request.urlopen('http://127.0.0.1:8000/healthz', timeout=4).status == 200 else 1)"]

CMD ["plumbline", "serve", "--host", "0.0.0.0", "--port", "8000"]
