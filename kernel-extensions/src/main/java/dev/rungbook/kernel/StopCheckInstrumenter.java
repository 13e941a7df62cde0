package dev.rungbook.kernel;

import java.util.HashSet;
import java.util.Set;
import org.objectweb.asm.ClassReader;
import org.objectweb.asm.ClassVisitor;
import org.objectweb.asm.ClassWriter;
import org.objectweb.asm.Label;
import org.objectweb.asm.MethodVisitor;
import org.objectweb.asm.Opcodes;

/**
 * Rewrites a class file so that each method with code calls a static, argument-less check method at its entry and
 * right before every backward branch: a {@code GOTO} or conditional jump ({@code IF*}) whose target label comes earlier
 * in the method, and a {@code TABLESWITCH} / {@code LOOKUPSWITCH} with at least one earlier target. Every loop of the
 * method has such a back edge, so a loop cannot run forever without passing a check; the entry check bounds
 * recursion. Nothing else changes: the inserted {@code INVOKESTATIC} takes and leaves no operands, so the existing
 * stack map frames stay valid (their offsets are rewritten by ASM) and only the maximum sizes are recomputed.
 *
 * <p>A label counts as "earlier" when the method's code has already placed it where the branch is read, which is
 * exactly a branch to a lower offset. Constructors get the entry check before their {@code super(...)} call, which
 * the verifier allows for a static call that does not touch {@code this}.
 */
final class StopCheckInstrumenter {
    private final String owner;
    private final String method;

    /** An instrumenter whose checks call {@link StopCheck#poll()}. */
    StopCheckInstrumenter() {
        this(StopCheck.OWNER, StopCheck.METHOD);
    }

    /**
     * An instrumenter whose checks call {@code owner.method()}, a public static method taking nothing and returning
     * {@code void} (tests count calls with their own).
     *
     * @param owner internal name of the class holding the check, e.g. {@code dev/rungbook/kernel/StopCheck}
     * @param method name of the check method
     */
    StopCheckInstrumenter(String owner, String method) {
        this.owner = owner;
        this.method = method;
    }

    /**
     * The class file with the checks inserted.
     *
     * @throws IllegalArgumentException when ASM cannot read the class file (for example a class file version newer
     *     than this ASM release knows)
     */
    byte[] instrument(byte[] classFile) {
        ClassReader reader = new ClassReader(classFile);
        ClassWriter writer = new ClassWriter(reader, ClassWriter.COMPUTE_MAXS);
        reader.accept(new ClassVisitor(Opcodes.ASM9, writer) {
            @Override
            public MethodVisitor visitMethod(int access, String name, String descriptor, String signature,
                    String[] exceptions) {
                return new CheckingMethod(super.visitMethod(access, name, descriptor, signature, exceptions));
            }
        }, 0);
        return writer.toByteArray();
    }

    /** Inserts the checks into one method. */
    private final class CheckingMethod extends MethodVisitor {
        /** Labels already placed in the code: a branch to one of them goes backwards. */
        private final Set<Label> placed = new HashSet<>();

        CheckingMethod(MethodVisitor next) {
            super(Opcodes.ASM9, next);
        }

        @Override
        public void visitCode() {
            super.visitCode();
            check();
        }

        @Override
        public void visitLabel(Label label) {
            placed.add(label);
            super.visitLabel(label);
        }

        @Override
        public void visitJumpInsn(int opcode, Label label) {
            if (placed.contains(label)) {
                check();
            }
            super.visitJumpInsn(opcode, label);
        }

        @Override
        public void visitTableSwitchInsn(int min, int max, Label dflt, Label... labels) {
            if (anyPlaced(dflt, labels)) {
                check();
            }
            super.visitTableSwitchInsn(min, max, dflt, labels);
        }

        @Override
        public void visitLookupSwitchInsn(Label dflt, int[] keys, Label[] labels) {
            if (anyPlaced(dflt, labels)) {
                check();
            }
            super.visitLookupSwitchInsn(dflt, keys, labels);
        }

        private boolean anyPlaced(Label dflt, Label[] labels) {
            if (placed.contains(dflt)) {
                return true;
            }
            for (Label l : labels) {
                if (placed.contains(l)) {
                    return true;
                }
            }
            return false;
        }

        private void check() {
            super.visitMethodInsn(Opcodes.INVOKESTATIC, owner, method, "()V", false);
        }
    }

    /**
     * A class with no members, only a name and {@link Object} as its superclass: loaded into JShell's class loader,
     * it tells which loader cell classes are defined by (so that the kernel can check they see {@link StopCheck}).
     *
     * @param binaryName e.g. {@code REPL.$RungbookProbe}
     */
    static byte[] emptyClass(String binaryName) {
        ClassWriter writer = new ClassWriter(0);
        writer.visit(Opcodes.V1_8, Opcodes.ACC_PUBLIC | Opcodes.ACC_SUPER | Opcodes.ACC_SYNTHETIC,
                binaryName.replace('.', '/'), null, "java/lang/Object", null);
        writer.visitEnd();
        return writer.toByteArray();
    }
}
