package deid

import (
	"context"
	"log/slog"
)

// scrubHandler de-identifies the message and every string attribute of
// each record before passing it on.
type scrubHandler struct {
	inner slog.Handler
	scrub func(string) string
}

// LogHandler returns a handler that passes each record to inner with its
// message and string attributes (also inside groups) scrubbed.
func LogHandler(inner slog.Handler, scrub func(string) string) slog.Handler {
	return &scrubHandler{inner: inner, scrub: scrub}
}

func (h *scrubHandler) Enabled(ctx context.Context, l slog.Level) bool {
	return h.inner.Enabled(ctx, l)
}

func (h *scrubHandler) Handle(ctx context.Context, r slog.Record) error {
	out := slog.NewRecord(r.Time, r.Level, h.scrub(r.Message), r.PC)
	r.Attrs(func(a slog.Attr) bool {
		out.AddAttrs(h.attr(a))
		return true
	})
	return h.inner.Handle(ctx, out)
}

func (h *scrubHandler) attr(a slog.Attr) slog.Attr {
	v := a.Value.Resolve()
	switch v.Kind() {
	case slog.KindString:
		return slog.String(a.Key, h.scrub(v.String()))
	case slog.KindGroup:
		g := v.Group()
		as := make([]any, 0, len(g))
		for _, x := range g {
			as = append(as, h.attr(x))
		}
		return slog.Group(a.Key, as...)
	case slog.KindAny:
		if e, ok := v.Any().(error); ok {
			return slog.String(a.Key, h.scrub(e.Error()))
		}
		return slog.String(a.Key, h.scrub(v.String()))
	}
	return slog.Attr{Key: a.Key, Value: v}
}

func (h *scrubHandler) WithAttrs(as []slog.Attr) slog.Handler {
	out := make([]slog.Attr, len(as))
	for i, a := range as {
		out[i] = h.attr(a)
	}
	return &scrubHandler{inner: h.inner.WithAttrs(out), scrub: h.scrub}
}

func (h *scrubHandler) WithGroup(name string) slog.Handler {
	return &scrubHandler{inner: h.inner.WithGroup(name), scrub: h.scrub}
}
