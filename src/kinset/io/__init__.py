"""Reading input files: units, tables, reel.yaml. Readers never fit."""
