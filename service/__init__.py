"""The service around the engine: REST API (``app.py``, ``routes/``), durable jobs, storage, settings,
the HTTP client and the ``veramp`` command line (``cli/``)."""

__version__ = "0.1.0"

__all__ = ["__version__", "app", "cli", "client", "compute", "db", "deps", "errors", "jobs", "metrics", "plots",
           "schemas", "settings"]
