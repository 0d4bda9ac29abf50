"""The output stage: every figure and table.

``netprobe.output.plots`` draws layouts, profiles, flux, assessments and cut spectra;
``netprobe.output.study_report`` writes the tables, figures and text summary of a study report.
"""

__all__: list[str] = []
