"""A finished session folder, read with pandas and yaml (docs/recording.md)."""

from __future__ import annotations

from pathlib import Path

import yaml


class Session:
    def __init__(self, folder: Path):
        import pandas as pd

        self.folder = Path(folder)
        self.meta = yaml.safe_load((self.folder / "session.yaml").read_text())
        self.samples = pd.read_csv(self.folder / "samples.csv")
        self.events = pd.read_csv(self.folder / "events.csv")

    @classmethod
    def only_in(cls, folder: Path) -> "Session":
        found = sorted(p for p in Path(folder).iterdir() if p.is_dir())
        assert len(found) == 1, f"expected one session in {folder}, found {found}"
        return cls(found[0])

    @property
    def trip(self):
        return self.meta["trip"]
