package detector

// BuiltinDescriptionYAML returns the text of the built-in Lantern
// description, for recording it alongside data made with it.
func BuiltinDescriptionYAML() []byte { return append([]byte(nil), lanternYAML...) }
