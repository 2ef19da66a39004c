# rotorwatch agent image for the compose EXAMPLE (simulated input; no sound hardware needed).
# A box with real sensors runs the agent under systemd instead (deploy/install.md).
FROM python:3.11-slim
RUN apt-get update \
 && apt-get install -y --no-install-recommends libportaudio2 \
 && rm -rf /var/lib/apt/lists/*
WORKDIR /src
COPY pyproject.toml README.md ./
COPY agent ./agent
COPY simulators ./simulators
RUN pip install --no-cache-dir . && useradd --system --home /var/lib/rotorwatch rotorwatch \
 && mkdir -p /var/lib/rotorwatch && chown rotorwatch /var/lib/rotorwatch
USER rotorwatch
EXPOSE 8717 9717
CMD ["rotorwatch", "run", "--config", "/etc/rotorwatch/rotorwatch.toml"]
