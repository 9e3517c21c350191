"""The command line: the commands (`commands.main`), the console output, and the file-level job
runner (`job.run_files`) with its checks before any work (`preflight`) and the reader
of options as users write them (`options`).
"""

from skyscale._exports import lazy_exports

__all__, __getattr__, __dir__ = lazy_exports(__name__, {
    "commands": ["main", "build_parser", "demo_data_dir", "EXIT_CODES"],
})
