package daemon

import (
	"errors"
	"math"

	"glowgate/bus/modbus"
	"glowgate/convert"
)

// OPC UA status codes a reading can carry (OPC UA Part 4 / Part 8; the
// numbers are those of OPCFoundation/UA-Nodeset Schema/StatusCode.csv).
const (
	statusGood                              uint32 = 0x00000000
	statusBadCommunicationError             uint32 = 0x80050000
	statusBadTimeout                        uint32 = 0x800A0000
	statusBadNoCommunication                uint32 = 0x80310000
	statusBadOutOfRange                     uint32 = 0x803C0000
	statusBadConfigurationError             uint32 = 0x80890000
	statusBadNotConnected                   uint32 = 0x808A0000
	statusBadDeviceFailure                  uint32 = 0x808B0000
	statusBadSensorFailure                  uint32 = 0x808C0000
	statusUncertainLastUsableValue          uint32 = 0x40900000
	statusUncertainSensorNotAccurate        uint32 = 0x40930000
	statusUncertainEngineeringUnitsExceeded uint32 = 0x40940000
	statusUncertainSensorCalibration        uint32 = 0x420A0000
)

// conversionQuality grades a reading from its flags, its raw (published)
// temperature and its processed one, first match wins:
//
//	the last valid value held in for an invalid one  uncertain  UncertainLastUsableValue
//	no temperature, no usable signal (zero, negative,
//	NaN, Inf)                                        bad        BadSensorFailure
//	no temperature, a channel saturated, or no root
//	in the solver's bracket                          bad        BadOutOfRange
//	temperature outside the measuring range          uncertain  UncertainEngineeringUnitsExceeded
//	low signal, selective loss, suspected reflection,
//	a non-grey target, or a channel the published
//	temperature does not rest on unusable            uncertain  UncertainSensorNotAccurate
//	otherwise (an obstruction alone included: the
//	ratio holds through a neutral loss)              good       Good
func conversionQuality(flags convert.Flags, raw, processed float64) (quality string, status uint32) {
	missing := math.IsNaN(raw) || math.IsNaN(processed)
	switch {
	case flags&convert.Held != 0:
		return "uncertain", statusUncertainLastUsableValue
	case missing && flags&convert.NoSignal != 0:
		return "bad", statusBadSensorFailure
	case missing:
		return "bad", statusBadOutOfRange
	case flags&(convert.BelowRange|convert.AboveRange) != 0:
		return "uncertain", statusUncertainEngineeringUnitsExceeded
	case flags&(convert.LowSignal|convert.SelectiveLoss|convert.ReflectionSuspected|convert.Nongrey|convert.NoSignal|convert.Saturated) != 0:
		return "uncertain", statusUncertainSensorNotAccurate
	}
	return "good", statusGood
}

// commStatus maps a failed poll to its status code. Modbus exceptions
// 01-03 say the register map does not fit the head (a configuration
// fault); 04 is the device's own failure; 0A and 0B are a gateway's path
// and target failures.
func commStatus(err error) uint32 {
	var exc *modbus.ExceptionError
	if errors.As(err, &exc) {
		switch exc.Code {
		case 0x01, 0x02, 0x03:
			return statusBadConfigurationError
		case 0x04:
			return statusBadDeviceFailure
		case 0x0A:
			return statusBadNotConnected
		case 0x0B:
			return statusBadNoCommunication
		}
		return statusBadCommunicationError
	}
	switch modbus.Kind(err) {
	case modbus.KindTimeout:
		return statusBadTimeout
	case modbus.KindConnection:
		return statusBadNotConnected
	}
	return statusBadCommunicationError
}

// stateQuality worsens a reading's grade by what its head says of itself:
//
//	head_fault          bad        BadDeviceFailure
//	detector_saturated  bad        BadOutOfRange
//	aiming_light,
//	head_too_warm       uncertain  UncertainSensorNotAccurate
//	setting_mismatch    uncertain  UncertainSensorCalibration
//	window_dirty        (a flag only: the ratio holds through a grey loss)
//
// A grade only ever gets worse; between equals the first cause stays.
func stateQuality(flags []string, quality string, status uint32) (string, uint32) {
	rank := map[string]int{"good": 0, "uncertain": 1, "bad": 2}
	worsen := func(q string, s uint32) {
		if rank[q] > rank[quality] {
			quality, status = q, s
		}
	}
	for _, f := range flags {
		switch f {
		case "head_fault":
			worsen("bad", statusBadDeviceFailure)
		case "detector_saturated":
			worsen("bad", statusBadOutOfRange)
		case "aiming_light", "head_too_warm":
			worsen("uncertain", statusUncertainSensorNotAccurate)
		case "setting_mismatch":
			worsen("uncertain", statusUncertainSensorCalibration)
		}
	}
	return quality, status
}
