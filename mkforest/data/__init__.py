"""Data layer: reading trees and trait tables, clades across trees, the config.

Imports nothing from the other layers (only ``mkforest.errors``)."""
