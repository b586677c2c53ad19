"""The HTTP side: the FastAPI application, its dependencies, pages, routes and schemas."""
