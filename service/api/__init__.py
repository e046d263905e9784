"""The HTTP layer: app factory, routers, dependencies, schemas, error handling."""

from service.api.app import create_app

__all__ = ["create_app"]
