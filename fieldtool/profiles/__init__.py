"""Board profiles shipped with fieldtool (invented demonstration boards), read as package data."""
