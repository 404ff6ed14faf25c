"""What the builder takes to the bench: tables, BOM, reports, plots, schematic, netlist."""
