"""The REST service: build it with :func:`service.api.app.create_app`."""
