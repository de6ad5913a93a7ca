"""What one app instance was started with, handed to every view when it registers."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from webapp.files import Folder


@dataclass(frozen=True)
class Settings:
    folders: tuple[Folder, ...]  # listed in the picker; the first holds the demos or the user's
    save_index: int  # which folder "Save as" writes into
    cache_dir: Path

    @property
    def save_folder(self) -> Path:
        return self.folders[self.save_index].path
