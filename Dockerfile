FROM python:3.11-slim
WORKDIR /srv/stackledger
COPY pyproject.toml README.md ./
COPY app ./app
RUN pip install --no-cache-dir .
EXPOSE 8000
CMD ["sh", "-c", "stackledger db upgrade && stackledger serve --host 0.0.0.0 --port 8000"]
