"""Placeholder: loads datasets, caches full-pool matrices, runs analyses."""


class Engine:
    def __init__(self, store):
        self.store = store
