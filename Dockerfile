FROM python:3.11-slim
ENV OMP_NUM_THREADS=1 PYTHONUNBUFFERED=1
RUN apt-get update && apt-get install -y --no-install-recommends libgomp1 && rm -rf /var/lib/apt/lists/*
WORKDIR /app
COPY pyproject.toml README.md ./
COPY service ./service
COPY workers ./workers
COPY tuttiml ./tuttiml
RUN pip install --no-cache-dir .
CMD ["tutti", "start-workers"]
