"""Descriptors of rooted trees and graphs: barcodes, persistence images, distances."""
