"""The SQL models (one query per file; see sql/README or DEVELOPERS.md), shipped inside the package as
warranty_forecast.sql and read through importlib.resources. This folder is where they are edited."""
