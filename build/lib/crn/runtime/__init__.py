"""Running work safely: resource guards, interruption by signals, worker processes.

Every public name of the layer's modules is importable from here; a module is
imported only when one of its names is first used, so importing the layer is free.
"""

from importlib import import_module

#: Public name -> module of this layer that defines it.
_HOME = {
    "BATCHED_SECONDS_PER_STEP": "guards",
    "DIRECT_SECONDS_PER_EVENT": "guards",
    "EXACT_SECONDS_PER_TRANSITION": "guards",
    "Estimate": "guards",
    "WORK_LIMIT_SECONDS": "guards",
    "default_max_memory": "guards",
    "enforce": "guards",
    "ensemble_estimate": "guards",
    "exact_estimate": "guards",
    "format_bytes": "guards",
    "format_seconds": "guards",
    "machine_memory": "guards",
    "parse_memory": "guards",
    "regime_map_estimate": "guards",
    "time_course_bytes": "guards",
    "verify_estimate": "guards",
    "call_interruptibly": "interrupts",
    "exit_status": "interrupts",
    "handling": "interrupts",
    "reason": "interrupts",
    "received": "interrupts",
    "process_pool": "workers",
    "stop_workers": "workers",
    "worker_initializer": "workers",
}

__all__ = sorted(_HOME)


def __getattr__(name):
    home = _HOME.get(name)
    if home is None:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    value = getattr(import_module(f".{home}", __name__), name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(__all__))
