"""Operations files shipped with the package, written out by ``stream-miner ops-kit``.

- ``alerts.yml``: Prometheus alerting rules over the ``stream_miner_*`` metrics.
- ``alerts_test.yml``: ``promtool test rules`` unit tests of every alert.
- ``scrape.yml``: a Prometheus configuration scraping ``stream-miner run`` processes.
- ``dashboard.json``: a Grafana dashboard (templated Prometheus data source).

They are data, not code: read them with :func:`importlib.resources.files`.
"""
