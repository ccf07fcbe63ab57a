"""The stages of a measurement, each a module run in this order by
:func:`simwave.measure.core.run_stages` on one shared
:class:`~simwave.measure.stages.work.Work`:

record → state_levels → classify → find_transitions → input_aligned →
transition_metrics → steady_state → assemble

Each module's docstring says what it reads from the work, how many passes over the record
it makes, and what it fills in; a change to one stage needs only that module and
:mod:`.work`. The numerical tools the stages call live one level up:
:mod:`simwave.measure.levels` (histogram), :mod:`~simwave.measure.plateaus` (window
summary, staircases), :mod:`~simwave.measure.segments` (segment ends, settled test),
:mod:`~simwave.measure.transient` (edge finder, aberration regions),
:mod:`~simwave.measure.quality` (disturbance, uncertainty, cautions),
:mod:`~simwave.measure.steady` (fits), :mod:`~simwave.measure.predict`.
"""
