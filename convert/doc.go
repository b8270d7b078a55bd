// Package convert holds the radiometry of glowgate: Planck's law, channel
// models (ideal rectangular bands, tabulated spectral responsivities and
// Sakuma–Hattori calibration curves), brightness temperature, two-colour
// (ratio) temperature, and multi-colour conversion of up to eight channels
// with pair temperatures, a non-grey index and a multi-colour fit, all
// with quality flags.
//
// Ratio converts one pair of channels; Pyrometer converts two to eight
// channels into a Result. Both rest on tables of the channel models over
// the solver bracket whose cubic Hermite interpolants are checked against
// the models when the converter is built (to 1e-10 relative in signal and
// in temperature; where the check fails, Newton's method on the models
// stands in), so a two-colour conversion needs no model evaluation.
//
// The package is pure: it does no I/O, keeps no global state, starts no
// goroutines and reads no clock. Every function is safe for concurrent use
// as long as the values it is given are not modified meanwhile.
//
// Units are SI throughout: wavelengths in metres, temperatures in kelvin,
// spectral radiance in W·m⁻³·sr⁻¹ and band radiance in W·m⁻²·sr⁻¹. The
// second radiation constant c2 is always an explicit argument; C2ITS90 is
// the value to use by default (Preston-Thomas, Metrologia 27, 3, 1990),
// C2ByName maps a configured name to a value, and the same value must be
// used when a calibration is fitted and when it is inverted.
//
// Emissivity-ratio convention: k = ε_short/ε_long, the emissivity in the
// shorter-wavelength channel over that in the longer-wavelength channel.
// A grey body has k = 1.
package convert
