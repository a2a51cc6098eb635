/*
 * sketch_host.h -- just enough of a sketch-style framework's core API, on this computer, to
 * build examples/BalanceRig/BalanceRig.ino unchanged and run it (sketch_host.cpp): pins
 * are no-ops, time is a counter, the serial port is two byte queues. Host test code only.
 */
#ifndef SKETCH_HOST_H
#define SKETCH_HOST_H

#include <math.h>
#include <stddef.h>
#include <stdint.h>

enum { LOW = 0, HIGH = 1, INPUT = 0, OUTPUT = 1, INPUT_PULLUP = 2, RISING = 3 };
enum { A0 = 14, A1 = 15 };

void pinMode(int pin, int mode);
void digitalWrite(int pin, int value);
int digitalRead(int pin);
int analogRead(int pin);
void analogWrite(int pin, int value);
unsigned long micros(void);
void delay(unsigned long ms);
void noInterrupts(void);
void interrupts(void);
int digitalPinToInterrupt(int pin);
void attachInterrupt(int irq, void (*fn)(void), int mode);

class HostSerial {
public:
    void begin(unsigned long baud);
    int available(void);
    int read(void);
    int availableForWrite(void);
    size_t write(const uint8_t *data, size_t n);
    size_t println(const char *text);
};
extern HostSerial Serial;

#endif
