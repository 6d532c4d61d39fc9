"""The terminal UI (``benchlab ui``): the only package that imports textual.

It holds no logic of its own: every action calls ``benchlab.services`` (``characterize`` to open
benches and sweep, ``station`` for the acceptance window, judging, storing, the hands-free loop and
the output state; ``library`` and ``design`` for the Library, Sets and Sink views).
"""
