"""A whole sensor archive through the candidate anti-alias filters.

The layer sits on top of the single-recording check (:func:`filtertwin.checks.alias.check_alias`)
and adds what an archive needs, one module each, data flowing one way:

``discover``   inputs (files, folders, glob patterns) -> sorted list of recordings
``calibration`` what the numbers in a file are (fraction of full scale, counts, volts, the
               sensor's unit) -> levels in dBFS of the ADC and in the sensor's unit
``windows``    short-time aliased power of one window of samples; worst events kept in
               bounded memory
``scan``       one task per file: stream it in blocks through every candidate's twin, the
               short-time aliased power per channel, the worst events, and the single-recording
               check on the stretch around the file's worst moment
``tasks``      the tasks run serially, on Dask's local scheduler or on a ``dask.distributed``
               cluster, results in input order
``summary``    one verdict per candidate across the archive, the table rows

Nothing here prints or writes files: :mod:`filtertwin.report.archive` writes the table (CSV,
JSON) and the HTML page, :mod:`filtertwin.commands.alias_archive` prints.
"""
