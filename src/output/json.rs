//! JSON writer: the Document as nested objects.
