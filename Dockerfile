# gridscore dashboard on the bundled sample collection.
#   docker build -t gridscore .
#   docker run --rm -p 5006:5006 gridscore
# then open http://localhost:5006/ ; mount your own collection with
#   docker run --rm -p 5006:5006 -v /data/collection:/data gridscore gridscore serve /data --address 0.0.0.0 --allow-websocket-origin localhost:5006
FROM python:3.11-slim

ENV PYTHONDONTWRITEBYTECODE=1 \
    PYTHONUNBUFFERED=1 \
    PIP_NO_CACHE_DIR=1

RUN useradd --create-home --uid 1000 gridscore
WORKDIR /opt/gridscore
COPY pyproject.toml README.md ./
COPY evaluation ./evaluation
COPY app ./app
COPY sample_output ./sample_output
RUN pip install . && chown -R gridscore:gridscore /opt/gridscore

USER gridscore
ENV GRIDSCORE_CACHE=/home/gridscore/.cache/gridscore
EXPOSE 5006
CMD ["gridscore", "serve", "/opt/gridscore/sample_output", "--address", "0.0.0.0", "--port", "5006", "--allow-websocket-origin", "localhost:5006"]
