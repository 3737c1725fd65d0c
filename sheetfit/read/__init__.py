"""Read: a workbook or CSV file → tidy observations, each with its source row and a reason when it cannot be used."""
