FROM python:3.11-slim
WORKDIR /srv/stackledger
COPY pyproject.toml README.md ./
COPY app ./app
COPY migrations ./migrations
COPY sample_data ./sample_data
RUN pip install --no-cache-dir -e .
EXPOSE 8000
CMD ["sh", "-c", "stackledger db upgrade && stackledger serve --host 0.0.0.0 --port 8000"]
