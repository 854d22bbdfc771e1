package ucum

// Entry is one unit of the table of codes laboratories commonly report in.
type Entry struct {
	Code string
	Name string
	Kind string // mass concentration, mass fraction, amount concentration, ratio, count rate, absorbance, volume, mass, time
}

// Table lists the codes this package is built and tested for. Parse accepts
// more (any product or quotient of its atoms); the table is what a method
// configuration form would offer. Codes after UCUM 2.1 (from memory).
func Table() []Entry {
	t := make([]Entry, len(table))
	copy(t, table)
	return t
}

var table = []Entry{
	{"g/L", "gram per litre", "mass concentration"},
	{"mg/L", "milligram per litre", "mass concentration"},
	{"ug/L", "microgram per litre", "mass concentration"},
	{"ng/L", "nanogram per litre", "mass concentration"},
	{"pg/mL", "picogram per millilitre", "mass concentration"},
	{"ng/mL", "nanogram per millilitre", "mass concentration"},
	{"ug/mL", "microgram per millilitre", "mass concentration"},
	{"mg/mL", "milligram per millilitre", "mass concentration"},
	{"mg/dL", "milligram per decilitre", "mass concentration"},
	{"ug/dL", "microgram per decilitre", "mass concentration"},
	{"g/dL", "gram per decilitre", "mass concentration"},
	{"mg/kg", "milligram per kilogram", "mass fraction"},
	{"ug/kg", "microgram per kilogram", "mass fraction"},
	{"ng/g", "nanogram per gram", "mass fraction"},
	{"ug/g", "microgram per gram", "mass fraction"},
	{"mol/L", "mole per litre", "amount concentration"},
	{"mmol/L", "millimole per litre", "amount concentration"},
	{"umol/L", "micromole per litre", "amount concentration"},
	{"nmol/L", "nanomole per litre", "amount concentration"},
	{"pmol/L", "picomole per litre", "amount concentration"},
	{"1", "one (a pure ratio)", "ratio"},
	{"%", "percent", "ratio"},
	{"[ppth]", "parts per thousand", "ratio"},
	{"[ppm]", "parts per million", "ratio"},
	{"[ppb]", "parts per billion", "ratio"},
	{"{cps}", "counts per second, as an annotation (dimensionless in UCUM)", "count rate"},
	{"{counts}/s", "counts per second", "count rate"},
	{"{absorbance}", "absorbance (dimensionless)", "absorbance"},
	{"{AU}", "absorbance units, as an annotation (AU alone is UCUM's astronomic unit)", "absorbance"},
	{"L", "litre", "volume"},
	{"mL", "millilitre", "volume"},
	{"uL", "microlitre", "volume"},
	{"kg", "kilogram", "mass"},
	{"g", "gram", "mass"},
	{"mg", "milligram", "mass"},
	{"ug", "microgram", "mass"},
	{"ng", "nanogram", "mass"},
	{"s", "second", "time"},
	{"min", "minute", "time"},
	{"h", "hour", "time"},
	{"d", "day", "time"},
}
