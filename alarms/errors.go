package alarms

// Error is the type of the package's sentinel errors. They are constants,
// so the package keeps no variables; compare with errors.Is.
type Error string

// Error returns the text of e.
func (e Error) Error() string { return string(e) }

// The sentinel errors, wrapped with the alarm's name and what was asked.
const (
	// ErrInvalidRule: NewAlarm, NewSet or Restore was given a rule that
	// cannot work.
	ErrInvalidRule Error = "invalid alarm rule"
	// ErrInvalidSaved: Restore was given a saved state that no alarm can
	// be in.
	ErrInvalidSaved Error = "invalid saved alarm state"
	// ErrNothingToAcknowledge: Acknowledge on an alarm that awaits no
	// acknowledgment (normal, acknowledged, shelved, suppressed, out of
	// service).
	ErrNothingToAcknowledge Error = "nothing to acknowledge"
	// ErrNotShelved: Unshelve on an alarm that is not shelved.
	ErrNotShelved Error = "not shelved"
	// ErrShelveExpiry: Shelve with an expiry not after the time of the
	// request.
	ErrShelveExpiry Error = "shelve expiry not after now"
	// ErrOutOfService: the alarm is out of service, so it cannot be
	// shelved or taken out of service again.
	ErrOutOfService Error = "out of service"
	// ErrInService: SetOutOfService(false) on an alarm that is in service.
	ErrInService Error = "in service"
)
