package modelline

import (
	"slices"

	"github.com/go-logr/logr"
	"k8s.io/klog/v2"
	"sigs.k8s.io/controller-runtime/pkg/reconcile"
)

// requestLogger is the logger of one pass: the controller's, with the
// line's namespace and name. controller-runtime builds one per request (and
// adds the reconcile ID to it); the usual zap logger encodes every key and
// value as they are added, a few KiB a pass for a log line that is almost
// never written. Here they are kept aside and encoded only when a line is
// logged.
func requestLogger(base logr.Logger) func(*reconcile.Request) logr.Logger {
	base = base.WithValues("controller", "modelline", "controllerGroup", "plumbline.dev", "controllerKind", "ModelLine")
	return func(req *reconcile.Request) logr.Logger {
		if req == nil {
			return base
		}
		return deferValues(base, "ModelLine", klog.KRef(req.Namespace, req.Name), "namespace", req.Namespace, "name", req.Name)
	}
}

// deferValues returns l with kv added, encoded only when something is
// logged.
func deferValues(l logr.Logger, kv ...any) logr.Logger {
	sink := l.GetSink()
	if sink == nil {
		return l
	}
	// The wrapper is one more frame between the caller and the real sink.
	if cd, ok := sink.(logr.CallDepthLogSink); ok {
		sink = cd.WithCallDepth(1)
	}
	return logr.New(&lazySink{base: sink, kv: kv}).V(l.GetV())
}

// lazySink holds key/value pairs until a line is logged.
type lazySink struct {
	base logr.LogSink
	kv   []any
}

// Init is a no-op: the wrapped sink was initialised by its own logger.
func (s *lazySink) Init(logr.RuntimeInfo) {}

func (s *lazySink) Enabled(level int) bool { return s.base.Enabled(level) }

func (s *lazySink) Info(level int, msg string, kv ...any) {
	s.materialize().Info(level, msg, kv...)
}

func (s *lazySink) Error(err error, msg string, kv ...any) {
	s.materialize().Error(err, msg, kv...)
}

func (s *lazySink) WithValues(kv ...any) logr.LogSink {
	return &lazySink{base: s.base, kv: append(slices.Clip(s.kv), kv...)}
}

func (s *lazySink) WithName(name string) logr.LogSink {
	return &lazySink{base: s.base.WithName(name), kv: s.kv}
}

func (s *lazySink) WithCallDepth(depth int) logr.LogSink {
	cd, ok := s.base.(logr.CallDepthLogSink)
	if !ok {
		return s
	}
	return &lazySink{base: cd.WithCallDepth(depth), kv: s.kv}
}

func (s *lazySink) materialize() logr.LogSink {
	if len(s.kv) == 0 {
		return s.base
	}
	return s.base.WithValues(s.kv...)
}
