;;; costate-mode-test.el --- Checks of costate-mode over the examples -*- lexical-binding: t; -*-

;; emacs --batch -Q -l editors/emacs/test/costate-mode-test.el -f ert-run-tests-batch-and-exit

;;; Code:

(require 'ert)
(require 'cl-lib)

(defconst costate-test-dir (file-name-directory (or load-file-name buffer-file-name)))
(defconst costate-test-root (expand-file-name "../../.." costate-test-dir))
(load (expand-file-name "../costate-mode.el" costate-test-dir) nil t)

(defun costate-test-examples ()
  (directory-files (expand-file-name "examples" costate-test-root) t "\\.costate\\'"))

(defun costate-test-faces (pos)
  (let ((face (get-text-property pos 'face)))
    (if (listp face) face (list face))))

(defmacro costate-test-in-file (file &rest body)
  (declare (indent 1))
  `(with-temp-buffer
     (insert-file-contents ,file)
     (costate-mode)
     (font-lock-ensure)
     ,@body))

(defun costate-test-each (regexp group faces what counts key)
  "Check that every match of REGEXP (its GROUP) has one of FACES (a face or a list)."
  (save-excursion
    (goto-char (point-min))
    (while (re-search-forward regexp nil t)
      (let ((pos (match-beginning group)))
        ;; Comments are checked separately; skip matches inside them.
        ;; (syntax-ppss moves point, which would restart the search.)
        (unless (save-excursion (nth 4 (syntax-ppss pos)))
          (unless (cl-intersection (if (listp faces) faces (list faces)) (costate-test-faces pos))
            (ert-fail (format "%s line %d: %s has faces %S, expected %s"
                              (buffer-name) (line-number-at-pos pos) what (costate-test-faces pos) faces)))
          (cl-incf (alist-get key (car counts))))))))

(ert-deftest costate-mode-highlights-examples ()
  (let ((counts (list (list (cons 'comment 0) (cons 'doc 0) (cons 'number 0) (cons 'unit 0)
                            (cons 'item 0) (cons 'attribute 0) (cons 'builtin 0) (cons 'sense 0)))))
    (should (>= (length (costate-test-examples)) 3))
    (dolist (file (costate-test-examples))
      (costate-test-in-file file
        (rename-buffer (file-name-nondirectory file) t)
        (goto-char (point-min))
        (while (re-search-forward "//" nil t)
          (let* ((pos (match-beginning 0))
                 (doc (save-excursion (goto-char pos)
                                      (and (looking-at "///\\(?:[^/]\\|$\\)")
                                           (looking-back "^[ \t]*" (line-beginning-position)))))
                 (face (if doc 'font-lock-doc-face 'font-lock-comment-face)))
            (unless (memq face (costate-test-faces (1- (line-end-position))))
              (ert-fail (format "%s line %d: comment has faces %S, expected %s" file
                                (line-number-at-pos pos) (costate-test-faces (1- (line-end-position))) face)))
            (cl-incf (alist-get (if doc 'doc 'comment) (car counts)))
            (end-of-line)))
        (costate-test-each "\\_<[0-9]+\\(?:\\.[0-9]+\\)?\\(?:[eE][-+]?[0-9]+\\)?\\_>" 0
                           ;; A number inside a unit (`[1/min]') is part of the unit.
                           '(font-lock-constant-face font-lock-type-face) "number" counts 'number)
        (costate-test-each "\\[[^]\n]*\\]" 0 'font-lock-type-face "unit" counts 'unit)
        (costate-test-each (concat "^[ \t]*\\(" (regexp-opt costate-mode-block-keywords 'symbols) "\\)[ \t]*{")
                           1 'font-lock-keyword-face "item keyword" counts 'item)
        (costate-test-each "^[ \t]*\\(\\_<\\(?:problem\\|fn\\|time\\)\\_>\\)[ \t]+[A-Za-z_]" 1 'font-lock-keyword-face "item keyword" counts 'item)
        (costate-test-each "\\(\\_<\\(?:start\\|end\\|integral\\|sin\\|cos\\|exp\\)\\_>\\)[ \t]*(" 1 'font-lock-builtin-face "built-in" counts 'builtin)
        (costate-test-each "\\(\\_<\\(?:start\\|end\\|in\\|guess\\|scale\\|free\\)\\_>\\)[ \t]*[^ \t(]" 1 'font-lock-keyword-face "attribute" counts 'attribute)
        (costate-test-each "\\_<\\(?:minimize\\|maximize\\)\\_>" 0 'font-lock-keyword-face "sense" counts 'sense)))
    ;; A check that matched nothing proves nothing.
    (dolist (entry (car counts))
      (unless (> (cdr entry) 0)
        (ert-fail (format "no %s checked in the examples" (car entry)))))))

(ert-deftest costate-mode-trailing-triple-slash-is-a-comment ()
  (with-temp-buffer
    (insert "x = 1 /// trailing\n/// doc\n")
    (costate-mode)
    (font-lock-ensure)
    (should (memq 'font-lock-comment-face (costate-test-faces 12)))
    (should-not (memq 'font-lock-doc-face (costate-test-faces 12)))
    (should (memq 'font-lock-doc-face (costate-test-faces 22)))))

(ert-deftest costate-mode-indents-like-the-formatter ()
  ;; The examples are in `costate fmt' layout; re-indenting them must change nothing.
  (dolist (file (costate-test-examples))
    (costate-test-in-file file
      (let ((before (buffer-string)))
        (goto-char (point-min))
        (while (re-search-forward "^[ \t]+" nil t) (replace-match ""))
        (indent-region (point-min) (point-max))
        (should (equal (list file (buffer-string)) (list file before)))))))

(ert-deftest costate-mode-registers-with-eglot ()
  (defvar eglot-server-programs)
  (let ((eglot-server-programs nil)
        (costate-server-program '("/opt/costate/bin/costate" "lsp")))
    ;; Stand in for Eglot (built into Emacs 29, a package before): its loading runs our entry.
    (unless (featurep 'eglot) (provide 'eglot))
    (load (expand-file-name "../costate-mode.el" costate-test-dir) nil t)
    (let ((contact (cdr (assq 'costate-mode eglot-server-programs))))
      (should (functionp contact))
      (should (equal (funcall contact t) '("/opt/costate/bin/costate" "lsp"))))))

(ert-deftest costate-mode-is-chosen-for-costate-files ()
  (should (eq (cdr (assoc "\\.costate\\'" auto-mode-alist)) 'costate-mode)))

;;; costate-mode-test.el ends here
