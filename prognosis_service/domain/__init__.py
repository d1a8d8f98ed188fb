"""The service's domain layer: what the HTTP routers and commands call. No HTTP here."""
