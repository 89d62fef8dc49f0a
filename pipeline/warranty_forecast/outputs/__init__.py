"""What a run writes: charts (matplotlib Figures), the report (Markdown), text made safe for each sink,
and the atomic publishing of the output folder."""
