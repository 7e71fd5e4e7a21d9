// Package service is the HTTP service of Mottle: a chi router under /v1
// described by the OpenAPI document in package api, handlers for analyses
// and series, server-sent progress events, health, Prometheus metrics,
// bearer-token authentication and RFC 9457 problem documents.
//
// Jobs are kept by a jobs.Backend (the embedded bbolt-and-files backend by
// default) and computed by a runner.Runner the server starts with it; the
// computation is behind the Analyzer interface, implemented for the real
// pipeline by Pipeline (both of package runner). This is the only package
// of Mottle, apart from the commands, that imports net/http.
package service
