"""The API's routers, one per resource; they call the engine through ``service/compute.py`` and
``service/deps.py`` and never import each other."""

__all__ = ["amplitudes", "blocks", "circuits", "jobs", "ops", "paths", "xeb"]
