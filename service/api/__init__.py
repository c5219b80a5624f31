"""The HTTP layer: FastAPI routers, schemas and dependencies over the store and engine."""
