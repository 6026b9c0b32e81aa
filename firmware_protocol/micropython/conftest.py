"""pytest only (never copied to a board): the two board-only modules cannot be imported under CPython, so
doctest collection of this folder skips them (main.py would start the firmware, hw_machine.py needs ``machine``)."""

collect_ignore = ["main.py", "hw_machine.py"]
