"""The model explained: per-feature statistics (document frequency against how far the optimizer
moved each weight), frequency bins, the strongest and the rare-but-heavy features
(:mod:`~lintext.report.stats`), figures written as inline SVG by a small chart drawer of our own
(:mod:`~lintext.report.figures` over :mod:`~lintext.report.svgplot`), one page layout (:mod:`~lintext.report.layout`), and the pages
built on it: a model's report and the comparison of several models
(:mod:`~lintext.report.pages`, written by :mod:`~lintext.report.writer` with ``features.csv``),
the sweep page and the probe page. Reads models; knows nothing of tuning or the command line.

Public functions: :func:`~lintext.report.stats.feature_table`,
:func:`~lintext.report.stats.frequency_bins`, :func:`~lintext.report.stats.top_features`,
:func:`~lintext.report.stats.rare_heavy`, :func:`~lintext.report.writer.write_report`,
:func:`~lintext.report.writer.write_comparison`.
"""
