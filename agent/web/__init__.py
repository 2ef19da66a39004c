"""The built-in status page (its publisher: :mod:`rotorwatch.publishers.status_page`).

- :mod:`rotorwatch.web.board`: :class:`StatusBoard`, the latest update of every machine (thread-safe),
  with the JSON views the page reads;
- :mod:`rotorwatch.web.views`: pure functions turning analysis records into those views (downsampling,
  defect-frequency markers, band regions);
- :mod:`rotorwatch.web.server`: :class:`StatusServer`, the read-only HTTP server (stdlib) with its
  token-gated acknowledge/snapshot actions;
- :mod:`rotorwatch.web.health`: the rule behind ``/healthz`` (every machine updating), shared with the
  metrics endpoint;
- ``static/``: the page itself (HTML, CSS, plain JS drawing on canvas; no CDN, no build step).
"""
