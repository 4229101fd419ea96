"""The circuit model: the layout, the one element builder, the cascade engine, and the
parameterised models (dimension vector -> S-parameters and their exact gradient)."""
