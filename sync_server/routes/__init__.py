"""One route module per noun; each route declares its roles (see ``sync_server.app.ROUTE_ROLES``)."""
