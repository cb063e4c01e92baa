// A stub of Android's Context, so that golang.org/x/mobile's Seq.java
// compiles off Android in the binding's test.
package android.content;

public class Context {}
