"""Routers, one per resource."""
