"""Exporters: pure functions from a circuit (and its design response) to file bytes or text.

No Flask, no I/O: a CLI or a batch job can call them directly. Module map:

* ``board``: the complete board (parts, references, footprints, nets, DC voltages);
* ``values``: EDA value notation, SPICE numbers, natural reference order;
* ``names``: neutralising user text per format (file name, spreadsheet, SPICE, S-expression);
* ``response``: band edges, analysis range and response table from the engine;
* ``bom`` / ``bom_csv`` / ``bom_xlsx``: the BOM lines, the KiCad-compatible CSV, the workbook;
* ``spice``: the self-contained ngspice deck;
* ``kicad_common`` / ``kicad_sexpr`` / ``kicad_xml``: KiCad's ``.net`` and ``.xml`` netlists;
* ``formats``: ``export(kind, circuit, ...)``, the one entry point per download kind;
* ``schematic``: ``schematic(board, fmt=...)``, the board drawn as an SVG or PNG sheet.
"""
