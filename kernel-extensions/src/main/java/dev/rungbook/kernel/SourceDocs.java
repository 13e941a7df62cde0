package dev.rungbook.kernel;

import com.sun.source.doctree.DocCommentTree;
import com.sun.source.tree.ClassTree;
import com.sun.source.tree.CompilationUnitTree;
import com.sun.source.tree.MethodTree;
import com.sun.source.tree.Tree;
import com.sun.source.tree.VariableTree;
import com.sun.source.util.DocTrees;
import com.sun.source.util.JavacTask;
import com.sun.source.util.TreePath;
import java.io.IOException;
import java.io.InputStream;
import java.net.URI;
import java.nio.charset.StandardCharsets;
import java.util.List;
import java.util.Map;
import java.util.concurrent.ConcurrentHashMap;
import javax.tools.JavaCompiler;
import javax.tools.JavaFileObject;
import javax.tools.SimpleJavaFileObject;
import javax.tools.ToolProvider;

/**
 * Javadoc of the Rungbook API from the sources shipped in the jar (under {@link #ROOT}); JShell itself only reads
 * the JDK's {@code src.zip}. Sources are parsed with the JDK's compiler API (parse only, nothing is compiled).
 */
final class SourceDocs {
    /** Resource folder holding the API's {@code .java} files (outside the package tree, so javac ignores them). */
    static final String ROOT = "META-INF/rungbook-sources/";

    private final ClassLoader loader;
    private final Map<String, String> fileCache = new ConcurrentHashMap<>();

    SourceDocs(ClassLoader loader) {
        this.loader = loader;
    }

    /**
     * The doc comment of member {@code member} (null: the type itself) of top-level type {@code typeName}, or an
     * empty string. Overloads are told apart by their parameter count; {@code parameterCount} -1 takes the first.
     */
    String javadoc(String typeName, String member, int parameterCount) {
        String source = source(typeName);
        if (source.isEmpty()) {
            return "";
        }
        JavaCompiler javac = ToolProvider.getSystemJavaCompiler();
        if (javac == null) {
            return "";
        }
        String simple = typeName.substring(typeName.lastIndexOf('.') + 1);
        JavaFileObject file = new SimpleJavaFileObject(URI.create("string:///" + simple + ".java"),
                JavaFileObject.Kind.SOURCE) {
            @Override
            public CharSequence getCharContent(boolean ignoreEncodingErrors) {
                return source;
            }
        };
        JavacTask task = (JavacTask) javac.getTask(null, null, d -> { }, List.of("-proc:none"), null, List.of(file));
        DocTrees trees = DocTrees.instance(task);
        try {
            for (CompilationUnitTree unit : task.parse()) {
                for (Tree t : unit.getTypeDecls()) {
                    if (t instanceof ClassTree c && c.getSimpleName().contentEquals(simple)) {
                        TreePath classPath = new TreePath(new TreePath(unit), c);
                        if (member == null) {
                            return text(trees.getDocCommentTree(classPath));
                        }
                        for (Tree m : c.getMembers()) {
                            if (m instanceof MethodTree mt && mt.getName().contentEquals(member)
                                    && (parameterCount < 0 || mt.getParameters().size() == parameterCount)) {
                                return text(trees.getDocCommentTree(new TreePath(classPath, m)));
                            }
                            if (m instanceof VariableTree vt && vt.getName().contentEquals(member)) {
                                return text(trees.getDocCommentTree(new TreePath(classPath, m)));
                            }
                        }
                    }
                }
            }
        } catch (IOException | RuntimeException e) {
            return "";
        }
        return "";
    }

    private static String text(DocCommentTree doc) {
        return doc == null ? "" : doc.toString().strip();
    }

    private String source(String typeName) {
        return fileCache.computeIfAbsent(typeName, n -> {
            try (InputStream in = loader.getResourceAsStream(ROOT + n.replace('.', '/') + ".java")) {
                return in == null ? "" : new String(in.readAllBytes(), StandardCharsets.UTF_8);
            } catch (IOException e) {
                return "";
            }
        });
    }
}
