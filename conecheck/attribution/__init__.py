"""Attribution: which effect causes an offset, which correction removes it, which cut is safe.

Three optional stages run after the main comparison, as extensions of
:func:`conecheck.run.validate.validate`, and add sections to results.json:

* ``ladder`` (:mod:`.ladder`): the same cones with the survey's effects added one at a
  time; per statistic and bin the increment each effect adds, with its error, and the
  first failing rung;
* ``corrections`` (:mod:`.corrections`): several fibre-collision corrections applied to
  the same collided cones, compared with the uncollided truth of those cones and with
  the box;
* ``cuts`` (:mod:`.sweep`): a sweep of redshift cuts on the same cones, with the widest
  passing cut.

Every variant of the cones is built and measured through :mod:`.variants`, which shares
randoms, pair counts, cones and cached pieces between them; the error model of the
paired differences is in :mod:`.paired`. The sections' settings are in :mod:`.settings`
(read by the run configuration, so this package's ``__init__`` imports nothing that
needs the configuration); the run extensions are in :mod:`.stages`; their tables and
printed summary belong to the report stage (:mod:`conecheck.report.attribution_tables`).
"""
