"""fullfield: register DIC point clouds onto the model, level the model field, compare."""
