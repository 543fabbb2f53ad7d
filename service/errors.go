package service

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"maps"

	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/protoadapt"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/service/store"
)

// ErrorDomain is the google.rpc.ErrorInfo domain of every error this service returns.
const ErrorDomain = "voltcast.dev"

// Reasons: the google.rpc.ErrorInfo reason of every error this service returns (the
// catalogue of AIP-193). Clients may switch on them; they never change meaning.
const (
	ReasonInvalidField      = "INVALID_FIELD"              // INVALID_ARGUMENT: BadRequest lists the fields
	ReasonInvalidPageToken  = "INVALID_PAGE_TOKEN"         // INVALID_ARGUMENT: page_token not from this list
	ReasonRequestTooLarge   = "REQUEST_TOO_LARGE"          // INVALID_ARGUMENT / RESOURCE_EXHAUSTED: over a size limit
	ReasonNotFound          = "RESOURCE_NOT_FOUND"         // NOT_FOUND: ResourceInfo names the resource
	ReasonAlreadyExists     = "RESOURCE_ALREADY_EXISTS"    // ALREADY_EXISTS
	ReasonVersionConflict   = "VERSION_CONFLICT"           // ABORTED: changed concurrently (or etag mismatch); re-read and retry
	ReasonInUse             = "RESOURCE_IN_USE"            // FAILED_PRECONDITION: other resources refer to it
	ReasonBuiltIn           = "BUILT_IN_READ_ONLY"         // FAILED_PRECONDITION: the built-in catalogue cannot change
	ReasonNotRechargeable   = "NOT_RECHARGEABLE"           // FAILED_PRECONDITION: a primary cell must never be charged
	ReasonChargeTemperature = "OUTSIDE_CHARGE_TEMPERATURE" // FAILED_PRECONDITION: the pack is outside its charge temperature window
	ReasonQueueFull         = "CALIBRATION_QUEUE_FULL"     // RESOURCE_EXHAUSTED: every calibration worker is busy and the queue is full; retry later
	ReasonNotReady          = "NOT_READY"                  // FAILED_PRECONDITION: e.g. a calibration that has not succeeded
	ReasonNotImplemented    = "NOT_IMPLEMENTED"            // UNIMPLEMENTED: the call exists in the API but not yet here
	ReasonCancelled         = "CANCELLED"                  // CANCELLED: the caller went away
	ReasonDeadlineExceeded  = "DEADLINE_EXCEEDED"          // DEADLINE_EXCEEDED
	ReasonInternal          = "INTERNAL"                   // INTERNAL: details are in the server log only
	ReasonUnavailable       = "UNAVAILABLE"                // UNAVAILABLE: the store cannot be reached; retry with backoff
	ReasonSimulationFailure = "MODEL_FAILURE"              // FAILED_PRECONDITION: the model could not produce an answer for these inputs
	// Raised by the REST gateway itself (gateway/gateway.go), listed here so that the
	// catalogue is complete.
	ReasonInvalidJSON      = "INVALID_JSON"       // INVALID_ARGUMENT: the body is not JSON of the request, or names an unknown field
	ReasonUnknownPath      = "UNKNOWN_PATH"       // NOT_FOUND: no API method at that HTTP path
	ReasonMethodNotAllowed = "METHOD_NOT_ALLOWED" // UNIMPLEMENTED: the path exists, not with that HTTP method
)

// Error is an error the service raises itself, carrying everything the status needs.
// Handlers return it (or a domain error, see [toStatus]); only toStatus turns errors
// into gRPC statuses.
type Error struct {
	Code   codes.Code
	Reason string // one of the Reason constants
	Msg    string // lowercase, no final punctuation
	// Violations are field-level problems (INVALID_ARGUMENT) or precondition problems
	// (FAILED_PRECONDITION), depending on Code.
	Violations []Violation
	// Resource names the resource concerned (NOT_FOUND, ALREADY_EXISTS, ...), e.g.
	// "batteries/b1".
	Resource string
	// Metadata is added to the ErrorInfo's metadata (e.g. the safety cautions of a
	// refused charge plan).
	Metadata map[string]string
	// Err is the cause, if any; it is logged, never sent.
	Err error
}

// Violation is one field (or precondition) problem of a request.
type Violation struct {
	Field       string // request field path with proto names, e.g. "battery.series_count"
	Description string // what is wrong, lowercase
}

func (e *Error) Error() string {
	msg := e.Msg
	for _, v := range e.Violations {
		msg += "; " + v.Field + ": " + v.Description
	}
	if e.Err != nil {
		msg += ": " + e.Err.Error()
	}
	return msg
}

func (e *Error) Unwrap() error { return e.Err }

// invalid returns an INVALID_ARGUMENT error for one field.
func invalid(field, format string, args ...any) *Error {
	return &Error{Code: codes.InvalidArgument, Reason: ReasonInvalidField, Msg: "invalid request",
		Violations: []Violation{{Field: field, Description: fmt.Sprintf(format, args...)}}}
}

// violations collects field problems of one request, so a caller learns of all of them
// at once. The zero value is ready to use.
type violations []Violation

func (v *violations) add(field, format string, args ...any) {
	*v = append(*v, Violation{Field: field, Description: fmt.Sprintf(format, args...)})
}

// err returns the collected problems as one INVALID_ARGUMENT error, or nil.
func (v violations) err() error {
	if len(v) == 0 {
		return nil
	}
	return &Error{Code: codes.InvalidArgument, Reason: ReasonInvalidField, Msg: "invalid request", Violations: v}
}

// resourceErr attaches the resource name to a store error so that toStatus can name it.
func resourceErr(err error, resource string) error {
	if err == nil {
		return nil
	}
	return &resourceError{resource: resource, err: err}
}

type resourceError struct {
	resource string
	err      error
}

func (e *resourceError) Error() string { return e.resource + ": " + e.err.Error() }
func (e *resourceError) Unwrap() error { return e.err }

// toStatus is the one place where errors become gRPC statuses (STYLE.md §4). It matches
// with errors.Is/As, so wrapped errors map correctly:
//
//   - [*Error]: as it says;
//   - [*cell.FieldError] (model validation): INVALID_ARGUMENT naming the field, with
//     fieldPrefix put in front of the model's field path;
//   - store.ErrNotFound → NOT_FOUND, ErrAlreadyExists → ALREADY_EXISTS, ErrConflict →
//     ABORTED, ErrInUse → FAILED_PRECONDITION, ErrInvalidPageToken and
//     ErrInvalidArgument → INVALID_ARGUMENT;
//   - context.Canceled → CANCELLED, context.DeadlineExceeded → DEADLINE_EXCEEDED;
//   - an error that already is a gRPC status passes through;
//   - anything else → INTERNAL with a generic message; the detail is logged, never sent.
//
// Every status carries a google.rpc.ErrorInfo with [ErrorDomain] and a reason.
func toStatus(ctx context.Context, log *slog.Logger, err error, fieldPrefix string) error {
	if err == nil {
		return nil
	}
	var resource string
	var re *resourceError
	if errors.As(err, &re) {
		resource = re.resource
	}
	var se *Error
	var fe *cell.FieldError
	switch {
	case errors.As(err, &se):
		if se.Resource == "" {
			se.Resource = resource
		}
		return build(se)
	case errors.As(err, &fe):
		return build(&Error{Code: codes.InvalidArgument, Reason: ReasonInvalidField, Msg: "invalid request",
			Violations: []Violation{{Field: joinField(fieldPrefix, fe.Field), Description: fe.Reason}}})
	case errors.Is(err, store.ErrNotFound):
		return build(&Error{Code: codes.NotFound, Reason: ReasonNotFound, Msg: notFoundMsg(resource), Resource: resource})
	case errors.Is(err, store.ErrAlreadyExists):
		return build(&Error{Code: codes.AlreadyExists, Reason: ReasonAlreadyExists, Msg: "resource already exists", Resource: resource})
	case errors.Is(err, store.ErrConflict):
		return build(&Error{Code: codes.Aborted, Reason: ReasonVersionConflict, Msg: "resource changed concurrently; read it again and retry", Resource: resource})
	case errors.Is(err, store.ErrInUse):
		return build(&Error{Code: codes.FailedPrecondition, Reason: ReasonInUse, Msg: "resource is in use", Resource: resource,
			Violations: []Violation{{Field: "IN_USE", Description: "batteries still refer to it"}}})
	case errors.Is(err, store.ErrInvalidPageToken):
		return build(&Error{Code: codes.InvalidArgument, Reason: ReasonInvalidPageToken, Msg: "invalid page token",
			Violations: []Violation{{Field: "page_token", Description: "not a token from this list; start again with an empty token"}}})
	case errors.Is(err, store.ErrInvalidArgument):
		return build(&Error{Code: codes.InvalidArgument, Reason: ReasonInvalidField, Msg: "invalid request: " + err.Error()})
	case errors.Is(err, context.Canceled):
		return build(&Error{Code: codes.Canceled, Reason: ReasonCancelled, Msg: "request cancelled"})
	case errors.Is(err, context.DeadlineExceeded):
		return build(&Error{Code: codes.DeadlineExceeded, Reason: ReasonDeadlineExceeded, Msg: "deadline exceeded"})
	}
	if s, ok := status.FromError(err); ok {
		return s.Err()
	}
	log.ErrorContext(ctx, "internal error", slog.String("error", err.Error()))
	return build(&Error{Code: codes.Internal, Reason: ReasonInternal, Msg: "internal error"})
}

func notFoundMsg(resource string) string {
	if resource == "" {
		return "resource not found"
	}
	return resource + " not found"
}

func joinField(prefix, field string) string {
	switch {
	case prefix == "":
		return field
	case field == "":
		return prefix
	}
	return prefix + "." + field
}

// build turns e into a status with its details. The message is e.Msg plus the first
// violation, so that a client that shows only the message still says what is wrong.
func build(e *Error) error {
	msg := e.Msg
	if len(e.Violations) > 0 && e.Code == codes.InvalidArgument {
		msg += ": " + e.Violations[0].Field + ": " + e.Violations[0].Description
		if n := len(e.Violations) - 1; n > 0 {
			msg += fmt.Sprintf(" (and %d more)", n)
		}
	}
	st := status.New(e.Code, msg)
	info := &errdetails.ErrorInfo{Reason: e.Reason, Domain: ErrorDomain}
	if e.Resource != "" || len(e.Metadata) > 0 {
		info.Metadata = make(map[string]string, len(e.Metadata)+1)
		maps.Copy(info.Metadata, e.Metadata)
		if e.Resource != "" {
			info.Metadata["resource"] = e.Resource
		}
	}
	details := []protoadapt.MessageV1{info}
	switch e.Code {
	case codes.InvalidArgument:
		if len(e.Violations) > 0 {
			br := &errdetails.BadRequest{}
			for _, v := range e.Violations {
				br.FieldViolations = append(br.FieldViolations, &errdetails.BadRequest_FieldViolation{Field: v.Field, Description: v.Description})
			}
			details = append(details, br)
		}
	case codes.FailedPrecondition:
		if len(e.Violations) > 0 {
			pf := &errdetails.PreconditionFailure{}
			for _, v := range e.Violations {
				pf.Violations = append(pf.Violations, &errdetails.PreconditionFailure_Violation{Type: v.Field, Subject: e.Resource, Description: v.Description})
			}
			details = append(details, pf)
		}
	}
	if e.Resource != "" && (e.Code == codes.NotFound || e.Code == codes.AlreadyExists) {
		details = append(details, &errdetails.ResourceInfo{ResourceType: resourceType(e.Resource), ResourceName: e.Resource})
	}
	withDetails, err := st.WithDetails(details...)
	if err != nil {
		// Only a malformed detail message can fail here, a programming error; the bare
		// status still carries the code and message.
		return st.Err()
	}
	return withDetails.Err()
}
