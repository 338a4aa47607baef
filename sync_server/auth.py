"""Who is calling: a device token in ``Authorization: Bearer <token>``, never in the URL.

``require("manager", "analyst")`` is a FastAPI dependency that returns the calling device or answers 401 (no
or unknown token; revoked) / 403 (wrong role). Every route declares its roles in ``app.ROUTE_ROLES``.
"""

from __future__ import annotations

from typing import Annotated, Callable

from fastapi import Depends, HTTPException, Request

from schema.records import Device

__all__ = ["require"]


def _token(request: Request) -> str:
    header = request.headers.get("authorization", "")
    scheme, _, token = header.partition(" ")
    if scheme.lower() != "bearer" or not token.strip():
        raise HTTPException(401, detail="send the device token as 'Authorization: Bearer <token>'",
                            headers={"WWW-Authenticate": "Bearer"})
    return token.strip()


def require(*roles: str) -> Callable[..., Device]:
    """A dependency admitting only live devices with one of ``roles``."""

    def dependency(request: Request, token: Annotated[str, Depends(_token)]) -> Device:
        device = request.app.state.store.device_for_token(token)
        if device is None:
            raise HTTPException(401, detail="this token is unknown or its device was revoked; enrol the device again",
                                headers={"WWW-Authenticate": "Bearer"})
        if device.role not in roles:
            raise HTTPException(403, detail=f"a {device.role} device cannot do this; it needs the role {' or '.join(roles)}")
        return device

    dependency.roles = roles  # type: ignore[attr-defined]
    return dependency
