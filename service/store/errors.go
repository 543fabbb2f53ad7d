package store

import "errors"

// Sentinel errors returned (wrapped) by every [Store] implementation.
var (
	// ErrNotFound reports that the resource does not exist for this tenant.
	ErrNotFound = errors.New("store: not found")
	// ErrAlreadyExists reports that a resource with that id already exists.
	ErrAlreadyExists = errors.New("store: already exists")
	// ErrConflict reports that a compare-and-swap failed: the stored version is no
	// longer the expected one.
	ErrConflict = errors.New("store: version conflict")
	// ErrInvalidPageToken reports a page token that this store did not issue, that was
	// altered, or that belongs to a different tenant, list or filter.
	ErrInvalidPageToken = errors.New("store: invalid page token")
	// ErrInvalidArgument reports an argument the store refuses to keep: a malformed id,
	// a value out of range, invalid JSON, a watermark moving backwards.
	ErrInvalidArgument = errors.New("store: invalid argument")
	// ErrInUse reports that a resource cannot be deleted because others refer to it
	// (a battery type that batteries still use).
	ErrInUse = errors.New("store: in use")
)
