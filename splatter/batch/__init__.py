"""Batches of variations of one look: ``splatter vary`` and :func:`splatter.vary`.

Built on top of :mod:`splatter.render`, one module per job:

* :mod:`~splatter.batch.plan`: seeds, sweeps and batch files into a list of
  variations, each validated before anything renders;
* :mod:`~splatter.batch.manifest`: ``vary.json``, what each variation was,
  did and wrote; which finished variations a re-run can skip;
* :mod:`~splatter.batch.worker`: render one variation (in a worker process
  or on a Dask worker);
* :mod:`~splatter.batch.board`: ``board.png`` and ``board.gif``, every
  variation side by side, labelled;
* :mod:`~splatter.batch.run`: run a batch locally or on a Dask cluster.
"""
