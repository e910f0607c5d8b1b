"""Running work safely: resource guards, signals, seeds and the executor of parallel tasks.

Every public name of the layer's modules is importable from here; a module is
imported only when one of its names is first used, so importing the layer is free.
"""


from crn._lazy import lazy_exports

#: Public name -> module of this layer that defines it.
_HOME = {
    "BATCHED_SECONDS_PER_STEP": "guards",
    "DIRECT_SECONDS_PER_EVENT": "guards",
    "EXACT_SECONDS_PER_TRANSITION": "guards",
    "EXACT_FLOPS_PER_SECOND": "guards",
    "exact_seconds": "guards",
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
    "Executor": "executor",
    "POOL_RESTARTS": "executor",
    "probe_scheduler": "executor",
    "call_interruptibly": "interrupts",
    "exit_status": "interrupts",
    "handling": "interrupts",
    "reason": "interrupts",
    "received": "interrupts",
    "child_streams": "seeds",
    "keyed_stream": "seeds",
    "root_seed": "seeds",
    "seed_entropy": "seeds",
    "process_pool": "workers",
    "stop_workers": "workers",
    "worker_initializer": "workers",
}

__all__ = sorted(_HOME)


__getattr__, __dir__ = lazy_exports(__name__, _HOME)
