"""Decision rules turned into tables the engines can apply."""
