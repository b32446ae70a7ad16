"""Shared by the lazy-input tests: watch what comes back to the client."""

from __future__ import annotations

import pickle


def record_client_results(monkeypatch) -> list[int]:
    """From now on, turning a dask array into numpy on the client fails, and every
    ``dask.compute`` appends the pickled size of what it returned to the list returned
    here: a test then bounds what travelled back, far below one chunk of the inputs."""
    import dask
    import dask.array as da

    returned: list[int] = []
    compute = dask.compute

    def recording(*args, **kwargs):
        out = compute(*args, **kwargs)
        returned.append(len(pickle.dumps(out)))
        return out

    def refuse(*args, **kwargs):
        raise AssertionError("a lazy array was gathered to the client")

    monkeypatch.setattr(dask, "compute", recording)
    monkeypatch.setattr(da.Array, "__array__", refuse)
    monkeypatch.setattr(da.Array, "compute", refuse)
    return returned
