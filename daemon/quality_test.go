package daemon

import (
	"context"
	"fmt"
	"testing"
	"time"

	"glowgate/bus/modbus"
)

// TestCommStatus: every Modbus exception code and failure kind gives a
// bad reading with its OPC UA status code (codes: OPC UA Part 4 status
// codes as listed in UA-Nodeset Schema/StatusCode.csv; exception meanings:
// Modbus Application Protocol V1.1b3, section 7).
func TestCommStatus(t *testing.T) {
	for _, tc := range []struct {
		err  error
		want uint32
	}{
		{&modbus.ExceptionError{Function: 4, Code: 0x01}, statusBadConfigurationError}, // illegal function
		{&modbus.ExceptionError{Function: 4, Code: 0x02}, statusBadConfigurationError}, // illegal data address
		{&modbus.ExceptionError{Function: 4, Code: 0x03}, statusBadConfigurationError}, // illegal data value
		{&modbus.ExceptionError{Function: 4, Code: 0x04}, statusBadDeviceFailure},      // server device failure
		{&modbus.ExceptionError{Function: 4, Code: 0x06}, statusBadCommunicationError}, // server device busy
		{&modbus.ExceptionError{Function: 3, Code: 0x0A}, statusBadNotConnected},       // gateway path unavailable
		{&modbus.ExceptionError{Function: 3, Code: 0x0B}, statusBadNoCommunication},    // gateway target failed to respond
		{fmt.Errorf("read: %w", modbus.ErrTimeout), statusBadTimeout},
		{fmt.Errorf("read: %w", modbus.ErrConnection), statusBadNotConnected},
		{fmt.Errorf("read: %w", modbus.ErrFrame), statusBadCommunicationError},
		{fmt.Errorf("read: %w", modbus.ErrShortResponse), statusBadCommunicationError},
		{context.Canceled, statusBadNotConnected},
	} {
		if got := commStatus(tc.err); got != tc.want {
			t.Errorf("%v: status %#x, want %#x", tc.err, got, tc.want)
		}
	}
	h := kilnHead(t, "two")
	r := h.failed(time.Date(2026, 12, 1, 8, 0, 0, 0, time.UTC), &modbus.ExceptionError{Function: 4, Code: 0x0B})
	if r.Quality != "bad" || r.StatusCode != statusBadNoCommunication || r.Temperature != nil {
		t.Errorf("failed reading: %+v", r)
	}
}
