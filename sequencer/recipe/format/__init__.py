"""The recipe, station and dialect formats, each described once as pydantic models.

From these models come the validation of every file (sequencer.recipe.load), the JSON Schema
that `ccbench schema` prints (format.schema) and the key reference in docs/recipe-reference.md
(format.reference). The loader turns a validated model into the frozen dataclasses the rest of
the program uses; rules that span sections (recipe limits against the station, figures steps
against the judge) stay plain code in the loader.
"""
