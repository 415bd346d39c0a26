"""The generic REST adapter: any HTTP device described by a device profile.

``adapter`` (the backend: :class:`~jobkeeper.backends.rest.adapter.RestBackend` and the
registry's factory), ``profile`` (device profiles), ``config`` (a backend's table in
config.toml), ``http`` (requests, replies, in-call retries, error mapping), ``results``
(reading counts out of a reply) and ``wire`` (the wire formats: HTTP dates, structured
strings, JSON pointers, request templates; shared with the loopback device, which speaks
the same protocol).

Nothing is imported here: the loopback device reads ``wire`` without loading the adapter.
"""
