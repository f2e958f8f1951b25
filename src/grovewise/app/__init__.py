"""The Grovewise window: every step of a review on screen, driven through background workers.

This sub-package is the only place that imports Qt (PySide6). It holds no computation of
its own: pages draw the result objects of :class:`grovewise.review.Review`, and workers call
``review.run_step`` in a thread. Start it with :func:`grovewise.app.launch.run_window`.
"""
