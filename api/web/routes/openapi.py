"""The roles routes need, read from their dependencies, and the OpenAPI schema that shows them.

The role a route needs is written once, as its ``Viewer``/``Physicist``/``Admin`` parameter
(:mod:`beamaudit.api.web.deps`); :func:`required_role` reads it back from the route's dependency
tree, so the schema (``x-required-role``, the bearer security requirement) and the tests that prove
the 401 and 403 answers cannot drift from what the route enforces.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator
from dataclasses import dataclass
from functools import cache
from typing import Any, get_args

from fastapi import FastAPI
from fastapi.dependencies.models import Dependant
from fastapi.routing import APIRoute, iter_route_contexts

from beamaudit.api.store.auth import ROLES, Role

__all__ = [
    "SECURITY_SCHEME",
    "ApiOperation",
    "api_operations",
    "customise_openapi",
    "required_role",
]

SECURITY_SCHEME = "bearerToken"


@cache
def _role_checks() -> dict[Callable[..., Any], Role]:
    from beamaudit.api.web import deps

    checks: dict[Callable[..., Any], Role] = {}
    dependencies: tuple[tuple[Role, Any], ...] = (
        ("viewer", deps.Viewer),
        ("physicist", deps.Physicist),
        ("admin", deps.Admin),
    )
    for role, annotated in dependencies:
        depends = get_args(annotated)[1]
        checks[depends.dependency] = role
    return checks


def _calls(dependant: Dependant) -> Iterator[Callable[..., Any]]:
    for sub in dependant.dependencies:
        if sub.call is not None:
            yield sub.call
        yield from _calls(sub)


def required_role(route: APIRoute) -> Role | None:
    """The highest role any dependency of ``route`` asks for (``None``: no role check).

    A route that authenticates (``CurrentPrincipal``) without a role check needs ``viewer``.
    """
    from beamaudit.api.web.deps import get_principal

    checks = _role_checks()
    found: list[Role] = [checks[c] for c in _calls(route.dependant) if c in checks]
    if found:
        return max(found, key=ROLES.index)
    if any(c is get_principal for c in _calls(route.dependant)):
        return "viewer"
    return None


@dataclass(frozen=True, slots=True)
class ApiOperation:
    """One method of one API route as the application serves it (prefix included)."""

    path: str
    method: str
    route: APIRoute

    @property
    def role(self) -> Role | None:
        return required_role(self.route)


def api_operations(app: FastAPI) -> list[ApiOperation]:
    """Every method of every API route of ``app``, included routers flattened."""
    out: list[ApiOperation] = []
    for context in iter_route_contexts(app.routes):
        route = context.original_route
        if not isinstance(route, APIRoute) or context.path_format is None:
            continue
        for method in sorted(context.methods or ()):
            out.append(ApiOperation(context.path_format, method, route))
    return out


def customise_openapi(app: FastAPI) -> None:
    """Make ``app.openapi()`` state each operation's role and the bearer-token scheme."""

    generate = app.openapi

    def openapi() -> dict[str, Any]:
        if app.openapi_schema is None:
            _annotate(app, generate())
        assert app.openapi_schema is not None
        return app.openapi_schema

    app.openapi = openapi  # type: ignore[method-assign]


def _annotate(app: FastAPI, schema: dict[str, Any]) -> None:
    schema.setdefault("components", {}).setdefault("securitySchemes", {})[SECURITY_SCHEME] = {
        "type": "http",
        "scheme": "bearer",
        "description": "An API token (`beamaudit token create --role ...`).",
    }
    for op in api_operations(app):
        role = op.role
        operation = schema["paths"].get(op.path, {}).get(op.method.lower())
        if role is None or operation is None or not op.route.include_in_schema:
            continue
        operation["security"] = [{SECURITY_SCHEME: []}]
        operation["x-required-role"] = role
        note = f"Needs the **{role}** role (or higher)."
        description = operation.get("description")
        operation["description"] = f"{description}\n\n{note}" if description else note
