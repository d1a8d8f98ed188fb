"""The operations dashboard served by the service: one HTML page, its script and style, and
server-side SVG charts (read scope)."""

from prognosis_service.dashboard.routes import router

__all__ = ["router"]
