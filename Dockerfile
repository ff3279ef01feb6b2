# trailcast service image (also the Dask scheduler/worker image in deploy/compose.dask.yaml).
# CPU only. Build: docker build -t trailcast .
# (No docker engine runs on the development machines; this file is kept simple and read-checked.)
FROM python:3.11-slim

ENV PYTHONDONTWRITEBYTECODE=1 \
    PYTHONUNBUFFERED=1 \
    TRAILCAST_DATA_DIR=/data

WORKDIR /app
# gcc: reboundx ships as a source distribution and compiles at install time.
RUN apt-get update \
    && apt-get install -y --no-install-recommends gcc libc6-dev \
    && rm -rf /var/lib/apt/lists/*

COPY pyproject.toml README.md ./
COPY dynamics ./dynamics
COPY service ./service
RUN pip install --no-cache-dir . \
    && apt-get purge -y gcc libc6-dev && apt-get autoremove -y

RUN useradd --create-home trailcast && mkdir -p /data && chown trailcast /data
USER trailcast
VOLUME ["/data"]
EXPOSE 8000
HEALTHCHECK --interval=30s --timeout=5s CMD python -c "import urllib.request,sys; sys.exit(urllib.request.urlopen('http://127.0.0.1:8000/health').status != 200)"
# One server process (it runs the job queue; forecasts use TRAILCAST_WORKERS worker processes).
CMD ["trailcast", "serve", "--host", "0.0.0.0", "--port", "8000"]
