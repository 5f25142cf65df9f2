"""Count models behind one interface; `registry.make_model(name, ...)` builds one by its config name."""
