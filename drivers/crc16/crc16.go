// Package crc16 is the CRC-16/MODBUS checksum that ends every Modbus RTU
// frame: reflected polynomial 0xA001, initial value 0xFFFF, no final XOR,
// sent low byte first (Modbus over Serial Line V1.02 §6.2.2).
package crc16

import "encoding/binary"

// Modbus returns the CRC-16/MODBUS of b.
func Modbus(b []byte) uint16 {
	crc := uint16(0xFFFF)
	for _, c := range b {
		crc ^= uint16(c)
		for range 8 {
			if crc&1 != 0 {
				crc = crc>>1 ^ 0xA001
			} else {
				crc >>= 1
			}
		}
	}
	return crc
}

// Append adds the CRC of frame to it, low byte first, as the wire carries it.
func Append(frame []byte) []byte {
	return binary.LittleEndian.AppendUint16(frame, Modbus(frame))
}

// Valid says whether frame ends with the right CRC of what precedes it.
func Valid(frame []byte) bool {
	n := len(frame)
	return n >= 3 && binary.LittleEndian.Uint16(frame[n-2:]) == Modbus(frame[:n-2])
}
