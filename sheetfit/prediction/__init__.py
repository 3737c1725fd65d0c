"""Predict: stored models plus new rows → predictions with confidence and prediction intervals.

Modules: `compute` (the `predict` API and predict_cells, the arithmetic), `new_rows` (the sheet of
new rows `sheetfit predict` reads, and the check that it has every column the models need) and
`summary` (what a run did, and the error when no row can be predicted). The predictions workbook is
written by report.predictions; sheetfit.pipeline.predict_workbook runs the whole command.
"""
