package modbus

import "time"

// LineReadsPerSecond is the most reads a second one RTU line can carry, all
// units together, for reads of n registers (function 03 or 04) at baud with
// pause between requests: request 8 characters, a 3.5-character silence,
// reply 5 + 2n characters, then the quiet time before the next request —
// the pause, and at least another 3.5 characters — at 11 bits a character
// (Modbus over Serial Line V1.02 §2.5.1). The devices' own turnaround comes
// on top, so a real line gets somewhat less. plateau check can compare it
// with what the poll intervals of the units on one port ask for.
func LineReadsPerSecond(baud, n int, pause time.Duration) float64 {
	if baud <= 0 || n <= 0 {
		return 0
	}
	char := 11 / float64(baud) // seconds
	exchange := (8 + 3.5 + 5 + 2*float64(n)) * char
	return 1 / (exchange + max(pause.Seconds(), 3.5*char))
}
