"""The XML Schema of the model format."""
