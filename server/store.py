"""Placeholder: datasets and snapshots on disk (owner: intake/store work)."""


class Store:
    def __init__(self, data_dir):
        self.data_dir = data_dir
