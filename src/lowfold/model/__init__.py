"""What a model is: lattice geometry (``lattice``), site types and local operators
(``sites``), sectors (``sector``), terms (``terms``), the immutable ``Model`` (``model``) and
the model-file parser (``modelfile``; the format is docs/model-files.md)."""
