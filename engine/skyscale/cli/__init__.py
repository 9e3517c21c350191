"""The command line: the commands (`commands.main`) and the console output.

It parses arguments and presents results; the work is the library's (the file-level
job `skyscale.job.files.run_files`, the planner, the advisor).  Nothing imports it.
"""

from skyscale._exports import lazy_exports

__all__, __getattr__, __dir__ = lazy_exports(__name__, {
    "commands": ["main", "build_parser", "demo_data_dir", "EXIT_CODES"],
})
