# The windvane image: the package, the demo feature set and the demo scenario.
FROM python:3.11-slim
WORKDIR /app
COPY pyproject.toml README.md ./
COPY service service
COPY demo demo
COPY featuredefs featuredefs
RUN pip install --no-cache-dir . && useradd --system windvane
USER windvane
ENV WINDVANE_DEFS=/app/featuredefs
EXPOSE 8700
CMD ["windvane", "serve", "--host", "0.0.0.0", "--port", "8700"]
