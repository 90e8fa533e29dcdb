package sim

import (
	"encoding/binary"
	"errors"

	"github.com/simonvetter/modbus"

	"plateau/drivers/crc16"
)

// Modbus function codes the responder serves (MODBUS Application Protocol
// Specification V1.1b3, §6).
const (
	fcReadCoils          = 0x01
	fcReadDiscreteInputs = 0x02
	fcReadHolding        = 0x03
	fcReadInput          = 0x04
	fcWriteCoil          = 0x05
	fcWriteRegister      = 0x06
	fcWriteCoils         = 0x0F
	fcWriteRegisters     = 0x10
)

// Exception codes (REFERENCES.md §9.2).
const (
	exIllegalFunction    = 0x01
	exIllegalDataAddress = 0x02
	exIllegalDataValue   = 0x03
	exDeviceFailure      = 0x04
	exDeviceBusy         = 0x06
)

// Spec limits on quantities per request (spec §6.1–6.12).
const (
	maxReadBits   = 2000
	maxReadRegs   = 125
	maxWriteBits  = 1968
	maxWriteRegs  = 123
	maxRTUFrame   = 256 // serial line guide §2.5.1
	minRTUFrame   = 4   // address, function, CRC
	broadcastUnit = 0
)

// rtuResponder turns complete RTU request frames into response frames for
// one unit id, asking a modbus.RequestHandler for the data.
type rtuResponder struct {
	unit uint8
	h    modbus.RequestHandler
}

// respond handles one frame. It returns nil when the rules say to stay
// silent: bad CRC or short frame (the request is discarded), another unit's
// address, or a broadcast (executed, never answered).
func (r *rtuResponder) respond(frame []byte) []byte {
	if len(frame) < minRTUFrame || len(frame) > maxRTUFrame {
		return nil
	}
	body := frame[:len(frame)-2]
	if binary.LittleEndian.Uint16(frame[len(frame)-2:]) != crc16.Modbus(body) {
		return nil
	}
	unit := body[0]
	if unit != r.unit && unit != broadcastUnit {
		return nil
	}
	pdu := r.pdu(unit, body[1:])
	if unit == broadcastUnit {
		return nil
	}
	return crc16.Append(append([]byte{unit}, pdu...))
}

// pdu executes one request PDU and returns the response PDU (or exception).
func (r *rtuResponder) pdu(unit uint8, req []byte) []byte {
	fc := req[0]
	data := req[1:]
	exception := func(code byte) []byte { return []byte{fc | 0x80, code} }
	fail := func(err error) []byte { return exception(exceptionCode(err)) }
	if len(data) < 4 {
		switch fc {
		case fcReadCoils, fcReadDiscreteInputs, fcReadHolding, fcReadInput,
			fcWriteCoil, fcWriteRegister, fcWriteCoils, fcWriteRegisters:
			return exception(exIllegalDataValue)
		}
		return exception(exIllegalFunction)
	}
	addr := binary.BigEndian.Uint16(data[0:2])
	qty := binary.BigEndian.Uint16(data[2:4]) // the value, for single writes
	if int(addr)+int(qty) > 0x10000 && fc != fcWriteCoil && fc != fcWriteRegister {
		return exception(exIllegalDataAddress)
	}
	switch fc {
	case fcReadCoils, fcReadDiscreteInputs:
		if qty < 1 || qty > maxReadBits || len(data) != 4 {
			return exception(exIllegalDataValue)
		}
		var v []bool
		var err error
		if fc == fcReadCoils {
			v, err = r.h.HandleCoils(&modbus.CoilsRequest{UnitId: unit, Addr: addr, Quantity: qty})
		} else {
			v, err = r.h.HandleDiscreteInputs(&modbus.DiscreteInputsRequest{UnitId: unit, Addr: addr, Quantity: qty})
		}
		if err != nil {
			return fail(err)
		}
		if len(v) != int(qty) {
			return exception(exDeviceFailure)
		}
		packed := packBits(v)
		return append([]byte{fc, byte(len(packed))}, packed...)

	case fcReadHolding, fcReadInput:
		if qty < 1 || qty > maxReadRegs || len(data) != 4 {
			return exception(exIllegalDataValue)
		}
		var v []uint16
		var err error
		if fc == fcReadHolding {
			v, err = r.h.HandleHoldingRegisters(&modbus.HoldingRegistersRequest{UnitId: unit, Addr: addr, Quantity: qty})
		} else {
			v, err = r.h.HandleInputRegisters(&modbus.InputRegistersRequest{UnitId: unit, Addr: addr, Quantity: qty})
		}
		if err != nil {
			return fail(err)
		}
		if len(v) != int(qty) {
			return exception(exDeviceFailure)
		}
		out := []byte{fc, byte(2 * len(v))}
		for _, w := range v {
			out = binary.BigEndian.AppendUint16(out, w)
		}
		return out

	case fcWriteCoil:
		if len(data) != 4 || (qty != 0xFF00 && qty != 0x0000) {
			return exception(exIllegalDataValue)
		}
		_, err := r.h.HandleCoils(&modbus.CoilsRequest{UnitId: unit, Addr: addr, Quantity: 1, IsWrite: true, Args: []bool{qty == 0xFF00}})
		if err != nil {
			return fail(err)
		}
		return append([]byte{fc}, data...) // the reply echoes the request

	case fcWriteRegister:
		if len(data) != 4 {
			return exception(exIllegalDataValue)
		}
		_, err := r.h.HandleHoldingRegisters(&modbus.HoldingRegistersRequest{UnitId: unit, Addr: addr, Quantity: 1, IsWrite: true, Args: []uint16{qty}})
		if err != nil {
			return fail(err)
		}
		return append([]byte{fc}, data...)

	case fcWriteCoils:
		if len(data) < 5 || qty < 1 || qty > maxWriteBits || int(data[4]) != (int(qty)+7)/8 || len(data) != 5+int(data[4]) {
			return exception(exIllegalDataValue)
		}
		args := make([]bool, qty)
		for i := range args {
			args[i] = data[5+i/8]>>(i%8)&1 == 1
		}
		if _, err := r.h.HandleCoils(&modbus.CoilsRequest{UnitId: unit, Addr: addr, Quantity: qty, IsWrite: true, Args: args}); err != nil {
			return fail(err)
		}
		return append([]byte{fc}, data[:4]...)

	case fcWriteRegisters:
		if len(data) < 5 || qty < 1 || qty > maxWriteRegs || int(data[4]) != 2*int(qty) || len(data) != 5+int(data[4]) {
			return exception(exIllegalDataValue)
		}
		args := make([]uint16, qty)
		for i := range args {
			args[i] = binary.BigEndian.Uint16(data[5+2*i:])
		}
		if _, err := r.h.HandleHoldingRegisters(&modbus.HoldingRegistersRequest{UnitId: unit, Addr: addr, Quantity: qty, IsWrite: true, Args: args}); err != nil {
			return fail(err)
		}
		return append([]byte{fc}, data[:4]...)
	}
	return exception(exIllegalFunction)
}

// wholeRequest says whether b is exactly one complete request frame with a
// good CRC: eight bytes for the reads and single writes, nine plus the byte
// count for the multiple writes (MODBUS Application Protocol V1.1b3 §6).
// Anything else waits for the silence that ends a frame.
func wholeRequest(b []byte) bool {
	if len(b) < 8 {
		return false
	}
	n := 8
	switch b[1] {
	case fcReadCoils, fcReadDiscreteInputs, fcReadHolding, fcReadInput, fcWriteCoil, fcWriteRegister:
	case fcWriteCoils, fcWriteRegisters:
		n = 9 + int(b[6])
	default:
		return false
	}
	return len(b) == n && binary.LittleEndian.Uint16(b[n-2:]) == crc16.Modbus(b[:n-2])
}

// packBits packs coil states eight to a byte, first coil in the low bit.
func packBits(v []bool) []byte {
	out := make([]byte, (len(v)+7)/8)
	for i, b := range v {
		if b {
			out[i/8] |= 1 << (i % 8)
		}
	}
	return out
}

// exceptionCode maps a handler's error to the exception it sends, as the
// TCP server of the library does.
func exceptionCode(err error) byte {
	switch {
	case errors.Is(err, modbus.ErrIllegalFunction):
		return exIllegalFunction
	case errors.Is(err, modbus.ErrIllegalDataAddress):
		return exIllegalDataAddress
	case errors.Is(err, modbus.ErrIllegalDataValue):
		return exIllegalDataValue
	case errors.Is(err, modbus.ErrServerDeviceBusy):
		return exDeviceBusy
	}
	return exDeviceFailure
}
