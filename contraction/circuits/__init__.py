"""Circuits: the model, gate matrices, OpenQASM and JSON readers and writers, bitstrings, random and
textbook circuits, cuts."""

__all__ = ["bitstrings", "gates", "json_document", "loader", "model", "patches", "qasm_lexer", "qasm_reader", "qasm_writer", "random_instances", "textbook"]
