"""Running a study: compose market, designs and estimators per replication; save and resume.

:mod:`.compose` (a design meets a market), :mod:`.replication` (the truth worlds
and every design's world on the same random numbers), :mod:`.executors`
(serial, processes, Dask), :mod:`.result` (the typed :class:`StudyResult`),
:mod:`.store` (the results folder), :mod:`.run` (:func:`run_study`,
:func:`run_truth`) and :mod:`.resources` (the memory guard).
"""

__all__: list[str] = []
