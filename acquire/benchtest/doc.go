// Package benchtest runs the engine end to end on the simulated bench over
// its real transports (Modbus TCP on loopback, Modbus RTU and line
// instruments on pseudo-terminals), with the real drivers and a real store:
// whole procedures with every injected fault, the safety guard against a
// real controller, dials read by the simulated operator, and the pipeline
// benchmark. The procedure's own logic is tested on a fake bench in
// acquire/procedure, in virtual time.
package benchtest
