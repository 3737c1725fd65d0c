"""Predict: stored models plus new rows → predictions with confidence and prediction intervals.

Modules: `compute` (the `predict` API and predict_cells, the arithmetic) and `new_rows` (the sheet of
new rows `sheetfit predict` reads). The predictions workbook is written by report.predictions;
sheetfit.pipeline.predict_workbook runs the whole command.
"""
